"""Area tables from a trend product: hectares and shares per trajectory and per modification rule."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from ..cube.georef import pixel_area_m2

__all__ = ["trajectory_area_table", "rule_area_table"]


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
