"""Tables of the report: hectares and shares per trajectory and per modification rule, and the date ledger."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from ..cube.georef import pixel_area_m2

__all__ = ["ledger_table", "trajectory_area_table", "rule_area_table"]


def _flag_labels(var: xr.DataArray) -> dict[int, str]:
    values = np.atleast_1d(var.attrs["flag_values"]).astype(int)
    meanings = str(var.attrs["flag_meanings"]).split()
    return dict(zip(values.tolist(), meanings))


def trajectory_area_table(trends: xr.Dataset) -> pd.DataFrame:
    """Area [ha] and share [%] of each trajectory label, per endmember.

    Parameters
    ----------
    trends : xarray.Dataset
        A trend product with a ``trajectory`` variable (endmember, y, x) carrying CF ``flag_values`` and
        ``flag_meanings``.

    Returns
    -------
    pandas.DataFrame
        One row per (endmember, trajectory) with columns ``pixels``, ``area_ha`` and ``share_pct``
        (share of pixels with enough valid dates).
    """
    traj = trends["trajectory"]
    labels = _flag_labels(traj)
    ha = pixel_area_m2(trends)[0] / 1e4
    rows = []
    for name in traj["endmember"].values:
        codes = np.asarray(traj.sel(endmember=name).values).ravel()
        counts = {code: int(np.count_nonzero(codes == code)) for code in labels}
        valid = sum(c for code, c in counts.items() if labels[code] != "insufficient_data")
        for code, label in labels.items():
            n = counts[code]
            share = 100.0 * n / valid if valid and label != "insufficient_data" else np.nan
            rows.append({"endmember": str(name), "trajectory": label, "pixels": n,
                         "area_ha": n * ha, "share_pct": share})
    return pd.DataFrame(rows)


def rule_area_table(trends: xr.Dataset) -> pd.DataFrame:
    """Area [ha] and share [%] of the map flagged by each modification rule.

    Reads the per-rule summaries a trend product carries (``rule_pixels``, ``rule_area``,
    ``rule_share`` and ``rule_expression`` on the ``rule`` dimension); an empty table when the product
    holds no rules.
    """
    columns = ["rule", "expression", "pixels", "area_ha", "share_pct"]
    if "rule_area" not in trends:
        return pd.DataFrame(columns=columns)
    return pd.DataFrame({
        "rule": [str(r) for r in trends["rule"].values],
        "expression": [str(e) for e in trends["rule_expression"].values],
        "pixels": np.asarray(trends["rule_pixels"].values, dtype=np.int64),
        "area_ha": np.asarray(trends["rule_area"].values, dtype=float),
        "share_pct": 100.0 * np.asarray(trends["rule_share"].values, dtype=float),
    }, columns=columns)


def ledger_table(ledger: xr.Dataset) -> pd.DataFrame:
    """The date ledger as a readable table: one row per date, headings in words.

    Columns: Date, Day of year, Sensor, Valid [%], Shift y / x [px] and its uncertainty, the band whose
    radiometric gain departs most from 1 with that gain, the lowest R² of the per-band fits, Used, and the
    reason (why a date was left out, or what was flagged). Columns of checks that were not run are left out.

    Parameters
    ----------
    ledger : xarray.Dataset
        As :func:`unmix.cube.ledger.build_ledger` gives it (or read back from a product or CSV).
    """
    t = ledger["time"].values.astype("datetime64[D]").astype(str)
    out: dict[str, object] = {"Date": t, "Day of year": ledger["doy"].values.astype(int)}
    if "sensor" in ledger:
        out["Sensor"] = ledger["sensor"].values.astype(str)
    if "valid_share" in ledger:
        out["Valid [%]"] = np.round(100 * ledger["valid_share"].values.astype(float), 1)
    if "shift_y" in ledger:
        out["Shift y [px]"] = np.round(ledger["shift_y"].values.astype(float), 2)
        out["Shift x [px]"] = np.round(ledger["shift_x"].values.astype(float), 2)
        if "shift_sd" in ledger:
            out["Shift ± [px]"] = np.round(ledger["shift_sd"].values.astype(float), 2)
    if "gain" in ledger:
        gain = ledger["gain"].transpose("time", "band").values.astype(float)
        bands = ledger["band"].values.astype(str)
        dev = np.abs(np.where(np.isfinite(gain), gain, 1.0) - 1.0)
        worst = dev.argmax(axis=1)
        rows = np.arange(gain.shape[0])
        out["Gain (band furthest from 1)"] = [
            f"{gain[i, j]:.3f} ({bands[j]})" if np.isfinite(gain[i, j]) else "" for i, j in zip(rows, worst)]
        if "r2" in ledger:
            r2 = ledger["r2"].values.astype(float)
            with np.errstate(all="ignore"):
                low = np.where(np.isfinite(r2).any(axis=1), np.nanmin(np.where(np.isfinite(r2), r2, np.inf), axis=1),
                               np.nan)
            out["Lowest R²"] = np.round(low, 3)
    out["Used"] = np.where(ledger["used"].values.astype(bool), "yes", "no")
    out["Reason or flag"] = ledger["reason"].values.astype(str)
    return pd.DataFrame(out)
