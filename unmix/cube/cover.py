"""Cover classes per period and the from-to change between two periods, per zone (lazy).

A period is a range of calendar years. Its fractions are, per pixel and endmember, the median of the
valid dates inside it (dates with no data are skipped; a pixel with none stays NaN). The class of a
pixel is its dominant endmember, or the first ``class`` line of the rules file whose thresholds
hold (:mod:`unmix.cover`). Two periods' class maps give a from-to table of ground areas [ha] per
zone: the conversions between cover classes, beside the trajectories that describe modifications
within a class.

References
----------
Olofsson, P., Foody, G. M., Herold, M., Stehman, S. V., Woodcock, C. E., & Wulder, M. A. (2014).
Good practices for estimating area and assessing accuracy of land change. Remote Sensing of
Environment, 148, 42-57. doi:10.1016/j.rse.2014.02.015
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr

from ..cover import ClassRule, class_names_of, dominant_class, rule_classes
from ..errors import InputError
from .zones import NO_DATA, zone_area_table

__all__ = ["Period", "parse_periods", "default_periods", "period_fractions", "period_classes",
           "from_to_table", "from_to_frame"]


@dataclass(frozen=True)
class Period:
    """Calendar years ``first`` to ``last``, both included."""

    first: int
    last: int

    @property
    def label(self) -> str:
        return str(self.first) if self.first == self.last else f"{self.first}-{self.last}"


_PERIOD = re.compile(r"\s*(\d{4})\s*(?:-\s*(\d{4}))?\s*\Z")


def parse_periods(text: str) -> tuple[Period, Period]:
    """Two periods from ``"2005-2006,2013-2014"`` (a single year ``"2005"`` is a one-year period).

    Examples
    --------
    >>> parse_periods("2005-2006,2014")
    (Period(first=2005, last=2006), Period(first=2014, last=2014))
    """
    parts = text.split(",")
    hint = "write two year ranges, e.g. '2005-2006,2013-2014'"
    if len(parts) != 2:
        raise InputError(f"--periods {text!r}: {hint}")
    out = []
    for part in parts:
        m = _PERIOD.match(part)
        if not m:
            raise InputError(f"--periods {text!r}: {part.strip()!r} is not a year or a year range; {hint}")
        first, last = int(m.group(1)), int(m.group(2) or m.group(1))
        if last < first:
            raise InputError(f"--periods {text!r}: {part.strip()!r} ends before it starts; {hint}")
        out.append(Period(first, last))
    return out[0], out[1]


def default_periods(times) -> tuple[Period, Period]:
    """The first and the last calendar year of a record."""
    years = pd.DatetimeIndex(np.asarray(times)).year
    return Period(int(years.min()), int(years.min())), Period(int(years.max()), int(years.max()))


def _nanmedian(block, axis):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN pixels stay NaN
        return np.nanmedian(block, axis=axis).astype(block.dtype, copy=False)


def period_fractions(fractions: xr.DataArray, period: Period) -> xr.DataArray:
    """Per-pixel median over the period's dates of each endmember's fraction (NaN dates skipped).

    Parameters
    ----------
    fractions : xarray.DataArray
        (time, endmember, y, x), lazy or not.
    period : Period

    Returns
    -------
    xarray.DataArray
        (endmember, y, x), same dtype; lazy when the input is.

    Raises
    ------
    InputError
        No date of the record falls in the period (the record's years are named).
    """
    years = fractions["time"].dt.year
    inside = (years >= period.first) & (years <= period.last)
    if not bool(inside.any()):
        have = sorted(set(int(y) for y in years.values))
        raise InputError(f"period {period.label} holds no date of the record (years {have[0]}..{have[-1]}); "
                         "choose --periods within the record")
    sub = fractions.isel(time=np.flatnonzero(inside.values))
    if sub.chunks is not None:
        sub = sub.chunk({"time": -1})
    return xr.apply_ufunc(_nanmedian, sub, input_core_dims=[["time"]], kwargs={"axis": -1},
                          dask="parallelized", output_dtypes=[sub.dtype])


def _classes_block(block, rules, endmembers):
    if rules:
        return rule_classes(block, rules, endmembers)
    return dominant_class(block)


def period_classes(fractions: xr.DataArray, period: Period,
                   rules: list[ClassRule] | None = None) -> tuple[xr.DataArray, list[str]]:
    """Cover class of each pixel in a period: the dominant endmember, or the first class rule that holds.

    Parameters
    ----------
    fractions : xarray.DataArray
        (time, endmember, y, x).
    period : Period
    rules : list of ClassRule, optional
        ``class`` lines of the rules file; none: the dominant endmember.

    Returns
    -------
    classes : xarray.DataArray
        (y, x) int16 codes into ``names``; -1 where the period has no valid fraction.
    names : list of str
        The endmember names, or the rule classes then ``unclassified``.
    """
    endmembers = [str(e) for e in fractions["endmember"].values]
    med = period_fractions(fractions, period)
    if med.chunks is not None:
        med = med.chunk({"endmember": -1})
    codes = xr.apply_ufunc(_classes_block, med, input_core_dims=[["endmember"]],
                           kwargs={"rules": list(rules or []), "endmembers": endmembers},
                           dask="parallelized", output_dtypes=[np.int16]).transpose("y", "x")
    names = class_names_of(rules) if rules else endmembers
    codes.attrs = {
        "long_name": f"cover class {period.label}",
        "flag_values": np.arange(-1, len(names), dtype=np.int16),
        "flag_meanings": " ".join([NO_DATA, *names]),
        "comment": ("class of the per-pixel median fractions of the period's dates: "
                    + ("first class rule that holds" if rules else "dominant endmember")),
    }
    return codes, names


def from_to_table(before: xr.DataArray, after: xr.DataArray, class_names, weights: xr.DataArray | None,
                  row_area=None) -> xr.Dataset:
    """Ground area [ha] moving from each class of one period to each class of another, per zone.

    Parameters
    ----------
    before, after : xarray.DataArray
        (y, x) class codes (:func:`period_classes`), -1 for no data.
    class_names : sequence of str
    weights : xarray.DataArray or None
        (zone, y, x) from :func:`unmix.cube.zones.zone_weights`; None: the whole map only.
    row_area : (ny,) ndarray, optional
        Pixel area per row [m^2]; by default from the grid.

    Returns
    -------
    xarray.Dataset
        ``area_ha`` and ``pixels`` on (zone, from_class, to_class), classes then ``no_data``; the
        zones then ``all_zones``, ``outside_zones``, ``whole_map``. Lazy when the inputs are.

    Examples
    --------
    >>> import shapely
    >>> from unmix.cube.zones import Zones, zone_weights
    >>> g = {"y": [1.5, 0.5], "x": [0.5, 1.5]}
    >>> a = xr.DataArray(np.array([[0, 0], [1, -1]], np.int16), dims=("y", "x"), coords=g)
    >>> b = xr.DataArray(np.array([[0, 1], [1, 1]], np.int16), dims=("y", "x"), coords=g)
    >>> w = zone_weights(Zones(("z",), (shapely.box(0, 0, 2, 2),)), a)
    >>> t = from_to_table(a, b, ["wood", "bare"], w, row_area=np.full(2, 1e4))
    >>> t["area_ha"].sel(zone="z").values.tolist()
    [[1.0, 1.0, 0.0], [0.0, 1.0, 0.0], [0.0, 1.0, 0.0]]
    """
    n = len(class_names) + 1

    def index(codes):
        return xr.where((codes >= 0) & (codes < n - 1), codes, n - 1).astype(np.int32)

    pairs = index(before) * n + index(after)
    pair_names = [f"{i}>{j}" for i in range(n) for j in range(n)]
    table = zone_area_table(pairs, pair_names, weights, row_area=row_area)
    names = [str(c) for c in class_names] + [NO_DATA]
    out = {}
    for var in ("area_ha", "pixels"):
        v = table[var].isel({"class": slice(0, n * n)}).data.reshape(table.sizes["zone"], n, n)
        out[var] = xr.DataArray(v, dims=("zone", "from_class", "to_class"),
                                coords={"zone": table["zone"].values, "from_class": names, "to_class": names},
                                attrs=dict(table[var].attrs))
    return xr.Dataset(out)


def from_to_frame(table: xr.Dataset, before: Period, after: Period) -> pd.DataFrame:
    """A from-to table as rows (zone, from class) and one column of hectares per to-class."""
    area = table["area_ha"].values
    rows = []
    for z, zone in enumerate(table["zone"].values):
        for i, name in enumerate(table["from_class"].values):
            row = {"zone": str(zone), "from_period": before.label, "to_period": after.label,
                   "from_class": str(name)}
            row.update({str(to): float(area[z, i, j]) for j, to in enumerate(table["to_class"].values)})
            rows.append(row)
    return pd.DataFrame(rows)
