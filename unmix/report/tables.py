"""Tables of the report: hectares and shares per trajectory and per modification rule, and the date ledger."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from ..cube.georef import pixel_area_rows

__all__ = ["TRAJECTORY_WORDS", "excluded_area", "from_to_table", "ledger_table", "rule_area_table",
           "trajectory_area_table", "zone_area_tables"]


def _flag_labels(var: xr.DataArray) -> dict[int, str]:
    values = np.atleast_1d(var.attrs["flag_values"]).astype(int)
    meanings = str(var.attrs["flag_meanings"]).split()
    return dict(zip(values.tolist(), meanings))


def _row_area_ha(ds: xr.Dataset) -> np.ndarray:
    """Ground area of one pixel of each row [ha] (exact per row on a geographic grid)."""
    areas, _ = pixel_area_rows(ds)
    return np.asarray(areas, dtype=float) / 1e4


#: Readable name of each trajectory label in the report's tables.
TRAJECTORY_WORDS = {
    "stable": "stable", "gradual_increase": "gradual increase", "gradual_decrease": "gradual decrease",
    "abrupt_increase": "abrupt increase", "abrupt_decrease": "abrupt decrease",
    "insufficient_data": "too few valid dates (left out)",
}


def trajectory_area_table(trends: xr.Dataset) -> pd.DataFrame:
    """Pixels, area [ha] and share of the valid area [%] of each trajectory label, per endmember.

    Parameters
    ----------
    trends : xarray.Dataset
        A trend product with a ``trajectory`` variable (endmember, y, x) carrying CF ``flag_values`` and
        ``flag_meanings``.

    Returns
    -------
    pandas.DataFrame
        One row per (endmember, trajectory) with the columns ``Endmember``, ``Trajectory``, ``Pixels``,
        ``Area [ha]`` (pixel areas summed row by row: exact on a geographic grid too) and ``Share of valid
        area [%]`` (the area with enough valid dates; the insufficient-data row has none).
    """
    traj = trends["trajectory"]
    labels = _flag_labels(traj)
    row_ha = _row_area_ha(trends)
    rows = []
    for name in traj["endmember"].values:
        codes = np.asarray(traj.sel(endmember=name).transpose("y", "x").values)
        per = {code: (int(np.count_nonzero(codes == code)), float(((codes == code).sum(axis=1) * row_ha).sum()))
               for code in labels}
        valid_ha = sum(a for code, (_, a) in per.items() if labels[code] != "insufficient_data")
        for code, label in labels.items():
            n, area = per[code]
            share = 100.0 * area / valid_ha if valid_ha and label != "insufficient_data" else np.nan
            rows.append({"Endmember": str(name), "Trajectory": TRAJECTORY_WORDS.get(label, label), "Pixels": n,
                         "Area [ha]": area, "Share of valid area [%]": share})
    return pd.DataFrame(rows)


def rule_area_table(trends: xr.Dataset) -> pd.DataFrame:
    """Pixels, area [ha] and share of the valid area [%] flagged by each modification rule.

    Reads the per-rule summaries a trend product carries (``rule_pixels``, ``rule_area``, ``rule_share``
    and ``rule_expression`` on the ``rule`` dimension); an empty table when the product holds no rules.
    """
    columns = ["Rule", "Expression", "Pixels", "Area [ha]", "Share of valid area [%]"]
    if "rule_area" not in trends:
        return pd.DataFrame(columns=columns)
    return pd.DataFrame({
        "Rule": [str(r) for r in trends["rule"].values],
        "Expression": [str(e) for e in trends["rule_expression"].values],
        "Pixels": np.asarray(trends["rule_pixels"].values, dtype=np.int64),
        "Area [ha]": np.asarray(trends["rule_area"].values, dtype=float),
        "Share of valid area [%]": 100.0 * np.asarray(trends["rule_share"].values, dtype=float),
    }, columns=columns)


def excluded_area(trends: xr.Dataset) -> dict[str, float]:
    """Area [ha] of the whole map, of pixels without data on any date, and of pixels with too few dates."""
    traj = trends["trajectory"]
    labels = _flag_labels(traj)
    insufficient = [c for c, lab in labels.items() if lab == "insufficient_data"]
    row_ha = _row_area_ha(trends)
    codes = np.asarray(traj.isel(endmember=0).transpose("y", "x").values)
    few = np.isin(codes, insufficient)
    out = {"map": float(codes.shape[1] * row_ha.sum()), "insufficient": float((few.sum(axis=1) * row_ha).sum())}
    if "n_valid" in trends:
        n_valid = np.asarray(trends["n_valid"].isel(endmember=0).transpose("y", "x").values)
        none = n_valid == 0
        out["no_data"] = float((none.sum(axis=1) * row_ha).sum())
    return out


def zone_area_tables(trends: xr.Dataset) -> dict[str, pd.DataFrame]:
    """Per-zone tables a trend product carries (``unmix trends --zones``): trajectories and rules per zone.

    Returns
    -------
    dict
        ``"zone_trajectory_areas"`` (Zone, Endmember, Trajectory, Area [ha], Share of the zone's valid area
        [%]) and ``"zone_rule_areas"`` (Zone, Rule, Area [ha], Share [%]) where present.
    """
    out = {}
    if "trajectory_zone_area" in trends:
        area = trends["trajectory_zone_area"].load()
        share = trends["trajectory_zone_share"].load()
        cls = [d for d in area.dims if d not in ("endmember", "zone")][0]
        rows = []
        for zone in area["zone"].values:
            for em in area["endmember"].values:
                for c in area[cls].values:
                    sel = {"zone": zone, "endmember": em, cls: c}
                    rows.append({"Zone": str(zone), "Endmember": str(em),
                                 "Trajectory": TRAJECTORY_WORDS.get(str(c), str(c)),
                                 "Area [ha]": float(area.sel(sel)), "Share of the zone's valid area [%]":
                                 float(share.sel(sel))})
        out["zone_trajectory_areas"] = pd.DataFrame(rows)
    if "rule_zone_area" in trends:
        area = trends["rule_zone_area"].load()
        share = trends["rule_zone_share"].load()
        rows = []
        for z in area["zone"].values:
            for r in area["rule"].values:
                sel = {"zone": z, "rule": r}
                if "rule_state" in area.dims:
                    sel["rule_state"] = "true"
                rows.append({"Zone": str(z), "Rule": str(r), "Area [ha]": float(area.sel(sel)),
                             "Share of the zone's valid area [%]": float(share.sel(sel))})
        out["zone_rule_areas"] = pd.DataFrame(rows)
    return out


def from_to_table(trends: xr.Dataset) -> pd.DataFrame | None:
    """The cover change a trend product carries (``unmix trends --cover-change``): hectares moving from each
    class of the first period (rows) to each class of the second (columns), per zone; None without it."""
    if "cover_change_area" not in trends:
        return None
    area = trends["cover_change_area"].load()
    periods = [str(p) for p in trends["period"].values] if "period" in trends.coords else ["first", "last"]
    rows = []
    for zone in area["zone"].values:
        for f in area["from_class"].values:
            row = {"Zone": str(zone), f"From ({periods[0]})": str(f)}
            for t in area["to_class"].values:
                row[f"to {t} [ha]"] = float(area.sel(zone=zone, from_class=f, to_class=t))
            rows.append(row)
    return pd.DataFrame(rows)


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
