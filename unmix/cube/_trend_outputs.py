"""CF attributes of the trend-cube variables, and the rule maps with their areas (private helpers
of :func:`unmix.cube.trends.trend_cube`)."""

from __future__ import annotations

from typing import Any

import numpy as np
import xarray as xr

from ..trajectory import FLAG_MEANINGS, FLAG_VALUES, Rule, evaluate_rules
from .georef import pixel_area_rows


def _rule_block(codes, *, rule, endmembers):
    return evaluate_rules([rule], codes, endmembers)[rule.name]


def _annotate(v: dict[str, xr.DataArray], *, q, min_slope, min_valid, min_step, confidence, seasonal=False) -> None:
    pct = f"{100 * confidence:g} %"
    test = "seasonal Kendall" if seasonal else "Mann-Kendall"
    sen = "seasonal Sen slope (pairs within a season)" if seasonal else "Theil-Sen slope"
    attrs: dict[str, dict[str, Any]] = {
        "trajectory": {
            "long_name": "trajectory of the fraction",
            "flag_values": FLAG_VALUES,
            "flag_meanings": FLAG_MEANINGS,
            "comment": (
                f"abrupt: Pettitt q <= {q}, BIC prefers a step over a line, |step| >= {min_step}; "
                f"gradual: {test} q <= {q} and |Sen slope| >= {min_slope} 1/yr; "
                f"insufficient_data: fewer than {min_valid} valid dates"
            ),
        },
        "slope": {"long_name": f"{sen} of the fraction", "units": "1/yr"},
        "slope_low": {"long_name": f"lower bound of the {pct} confidence interval of the {sen}", "units": "1/yr"},
        "slope_high": {"long_name": f"upper bound of the {pct} confidence interval of the {sen}", "units": "1/yr"},
        "intercept": {
            "long_name": "Sen intercept: fraction = intercept + slope * decimal year",
            "units": "1",
        },
        "tau": {"long_name": "Kendall's tau of the fraction against time", "units": "1"},
        "p_value": {"long_name": f"two-sided p-value of the {test} trend test", "units": "1"},
        "q_value": {"long_name": f"Benjamini-Hochberg adjusted {test} p-value over the endmember map", "units": "1"},
        "change_date": {"long_name": "first date after the break of an abrupt change"},
        "change_p": {"long_name": "p-value of the Pettitt change-point test", "units": "1"},
        "change_q": {"long_name": "Benjamini-Hochberg adjusted Pettitt p-value over the endmember map", "units": "1"},
        "step": {"long_name": "abrupt change: mean fraction after minus before the break", "units": "1"},
        "n_valid": {"long_name": "number of dates with a valid fraction", "units": "1"},
    }
    for name, a in attrs.items():
        v[name].attrs = a


def _add_rules(result: xr.Dataset, rules: list[Rule], endmembers: list[str], lazy: bool) -> None:
    codes = result["trajectory"]
    if lazy:
        codes = codes.chunk({"endmember": -1})
    row_area, area_note = pixel_area_rows(result)
    area_m2 = xr.DataArray(row_area, dims="y")
    counts_m2 = []
    counts, valids = [], []
    for rule in rules:
        mask = xr.apply_ufunc(
            _rule_block,
            codes,
            input_core_dims=[["endmember"]],
            kwargs={"rule": rule, "endmembers": endmembers},
            dask="parallelized",
            output_dtypes=[np.uint8],
        ).transpose("y", "x")
        mask.attrs = {
            "long_name": f"modification rule {rule.name}",
            "rule": rule.text,
            "flag_values": np.array([0, 1, 255], dtype=np.uint8),
            "flag_meanings": "false true insufficient_data",
            "comment": "255 where an endmember the rule names has insufficient_data; areas in rule_area",
        }
        count = (mask == 1).sum(("y", "x"))
        valid = (mask <= 1).sum(("y", "x"))
        area = ((mask == 1) * area_m2).sum(("y", "x"), skipna=False)
        if not lazy:
            c, v = int(count), int(valid)
            mask.attrs.update(
                pixel_count=c,
                area_ha=float(area) / 1e4,
                share_of_valid=(c / v) if v else float("nan"),
            )
        result[rule.name] = mask
        counts.append(count)
        valids.append(valid)
        counts_m2.append(area)
    names = [r.name for r in rules]
    count = xr.concat(counts, dim="rule").assign_coords(rule=names).astype(np.int64)
    valid = xr.concat(valids, dim="rule").assign_coords(rule=names).astype(np.int64)
    result["rule_pixels"] = count.assign_attrs(long_name="pixels where the rule is true", units="1")
    area = xr.concat(counts_m2, dim="rule").assign_coords(rule=names)
    result["rule_area"] = (area / 1e4).assign_attrs(
        long_name="area where the rule is true", units="ha", comment=area_note
    )
    result["rule_share"] = (count / valid.where(valid > 0)).assign_attrs(
        long_name="share of the pixels with data for the rule where it is true", units="1"
    )
    result["rule_expression"] = xr.DataArray([r.text for r in rules], dims="rule", coords={"rule": names}).assign_attrs(
        long_name="rule expression"
    )
