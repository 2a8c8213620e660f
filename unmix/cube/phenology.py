"""Phenological windows and annual composites of lazy cubes (see :mod:`unmix.comparability.phenology`).

Works on any DataArray with a ``time`` dimension of real dates: reflectance (time, band, y, x),
fractions (time, endmember, y, x) or a single series. Composites are computed with
``xarray.apply_ufunc(dask="parallelized")`` with time as the core dimension, so a dask cube stays
lazy and each task holds one chunk's whole series (the time axis is merged into one chunk).
"""

from __future__ import annotations

import enum

import numpy as np
import xarray as xr

from ..comparability.phenology import (
    DateWindow,
    check_date_count,
    closest_composite,
    day_of_year,
    median_composite,
    select_dates,
    warn_window,
    window_spread_days,
    year_groups,
)
from ..errors import InputError

__all__ = ["CompositeMethod", "select_window", "annual_composites"]


class CompositeMethod(str, enum.Enum):
    """How one year's observations in the window become one value per pixel.

    MEDIAN
        Per-pixel median of the valid observations.
    CLOSEST
        The valid observation whose day of year is closest to a target day (circular distance).
    """

    MEDIAN = "median"
    CLOSEST = "closest"


def _dates(cube: xr.DataArray) -> np.ndarray:
    if "time" not in cube.dims:
        raise InputError(f"a window needs a cube with a time dimension, got dims {cube.dims}")
    t = cube["time"].values
    if not np.issubdtype(t.dtype, np.datetime64):
        raise InputError(f"time must hold real dates (datetime64), got dtype {t.dtype}; open the product with "
                         "decoded times")
    return t


def _select(cube: xr.DataArray, window: DateWindow):
    dates = _dates(cube)
    mask, reasons = select_dates(dates, doy_window=window.doy_window, years=window.years,
                                 date_range=window.date_range)
    groups, years = year_groups(dates, mask, window)
    return dates, mask, reasons, groups, years


def select_window(cube: xr.DataArray, window: DateWindow, *, min_dates: int | None = None):
    """The dates of a cube inside a window (lazy), and why each other date was left out.

    Parameters
    ----------
    cube : (time, ...) xarray.DataArray
    window : DateWindow
    min_dates : int, optional
        Fewest dates the caller's trend tests need.

    Returns
    -------
    selected : xarray.DataArray
        ``cube.isel(time=...)``: lazy when ``cube`` is.
    reasons : (time,) xarray.DataArray of str
        On the cube's full time axis: "" for a kept date, else why it was left out.

    Raises
    ------
    InputError
        The window keeps fewer than ``min_dates`` dates (both counts named).

    Warns
    -----
    EmptyWindowYearWarning, WindowSpreadWarning
        A year between the first and last kept year has no date in the window; the years' typical
        in-window days differ by more than ``window.max_spread_days``.

    Examples
    --------
    >>> t = np.array(["2001-12-10", "2002-06-01", "2002-12-10"], "datetime64[ns]")
    >>> cube = xr.DataArray(np.arange(3.0), dims="time", coords={"time": t})
    >>> sel, why = select_window(cube, DateWindow(doy_window=(335, 60)))
    >>> sel.values.tolist(), why.values.tolist()
    ([0.0, 2.0], ['', 'outside day-of-year window 335-60', ''])
    """
    dates, mask, reasons, groups, years = _select(cube, window)
    if min_dates is not None:
        check_date_count(int(mask.sum()), min_dates, f"the window ({window.describe()})")
    warn_window(window, years, np.bincount(groups[mask], minlength=years.size),
                window_spread_days(dates, mask, groups))
    why = xr.DataArray(reasons, dims="time", coords={"time": cube["time"]}, name="reason",
                       attrs={"long_name": "why the date was left out of the window (empty: used)"})
    return cube.isel(time=np.flatnonzero(mask)), why


def _median_kernel(values, groups, n_groups):
    return median_composite(values, groups, n_groups)


def _closest_kernel(values, doy, groups, target, n_groups):
    return closest_composite(values, doy, groups, target, n_groups)


def _window_centre(window: DateWindow) -> float:
    if window.doy_window is None:
        raise InputError("a composite closest to a target day needs target_doy (1-366) or a day-of-year window "
                         "whose middle is the target")
    start, end = window.doy_window
    length = (end - start) % 365 + 1
    return float((start - 1 + (length - 1) / 2) % 365 + 1)


def annual_composites(cube: xr.DataArray, window: DateWindow, *, method: str | CompositeMethod = "median",
                      target_doy: float | None = None, min_years: int | None = None,
                      keep_empty: bool = False) -> xr.DataArray:
    """One composite per (season) year inside a window: lazy (year, ...) cube.

    Parameters
    ----------
    cube : (time, ...) xarray.DataArray
        Any cube on real dates; NaN = no data.
    window : DateWindow
    method : {"median", "closest"}
        :class:`CompositeMethod`.
    target_doy : float, optional
        Target day of year of ``closest`` (default: the middle of the day-of-year window).
    min_years : int, optional
        Fewest years with a date in the window that the caller's trend tests need.
    keep_empty : bool
        Keep years without any date in the window (all NaN, ``time`` NaT); default: drop them.

    Returns
    -------
    xarray.DataArray
        Dims ``year`` in place of ``time``, the other dims in their order; coordinates ``year``,
        ``time`` (on year: the median date of the year's dates in the window, or for ``closest`` the
        date of that year closest to the target), ``n_dates`` (on year: dates in the window) and
        ``n_obs`` (same dims as the data, int32: valid observations behind each value). Lazy when
        ``cube`` is. ``.swap_dims(year="time")`` gives a cube on dates for the trend tests.

    Raises
    ------
    InputError
        Fewer than ``min_years`` years have a date in the window; ``closest`` without a target.

    Warns
    -----
    EmptyWindowYearWarning, WindowSpreadWarning
        As :func:`select_window`; the spread is that of the composites' dates.

    Examples
    --------
    >>> t = np.array(["2001-12-10", "2002-01-20", "2002-12-10", "2003-02-01"], "datetime64[ns]")
    >>> cube = xr.DataArray([1.0, 3.0, 5.0, np.nan], dims="time", coords={"time": t})
    >>> out = annual_composites(cube, DateWindow(doy_window=(335, 60)))
    >>> out.values.tolist(), out.n_obs.values.tolist(), out.year.values.tolist()
    ([2.0, 5.0], [2, 1], [2001, 2002])
    """
    method = _method(method)
    dates, mask, _, groups, years = _select(cube, window)
    n_dates = np.bincount(groups[mask], minlength=years.size)
    if min_years is not None:
        check_date_count(int((n_dates > 0).sum()), min_years, f"the window ({window.describe()})", unit="years")
    all_years, all_counts = years, n_dates
    keep = np.ones(years.size, bool) if keep_empty else n_dates > 0
    renumber = np.cumsum(keep) - 1
    groups = np.where(groups >= 0, renumber[np.maximum(groups, 0)], -1)
    years, n_dates = years[keep], n_dates[keep]
    kept = np.flatnonzero(mask)
    sub = cube.isel(time=kept)
    sub_groups = groups[kept]
    doy = day_of_year(dates[kept])
    if sub.chunks is not None:
        sub = sub.chunk({"time": -1})
    dtype = cube.dtype if cube.dtype in (np.float32, np.float64) else np.float64
    common = dict(input_core_dims=[["time"]], output_core_dims=[["year"], ["year"]], exclude_dims={"time"},
                  dask="parallelized", output_dtypes=[dtype, np.int32],
                  dask_gufunc_kwargs={"output_sizes": {"year": int(years.size)}})
    if method is CompositeMethod.MEDIAN:
        values, counts = xr.apply_ufunc(_median_kernel, sub, kwargs={"groups": sub_groups,
                                                                     "n_groups": int(years.size)}, **common)
        when = [_median_date(dates[kept][sub_groups == g]) for g in range(years.size)]
        spread = window_spread_days(dates, mask & (groups >= 0), groups)
    else:
        target = _window_centre(window) if target_doy is None else float(target_doy)
        values, counts = xr.apply_ufunc(_closest_kernel, sub, kwargs={
            "doy": doy, "groups": sub_groups, "target": target, "n_groups": int(years.size)}, **common)
        _, _, index = closest_composite(np.zeros(kept.size), doy, sub_groups, target, int(years.size),
                                           return_index=True)
        when = [dates[kept][i] if i >= 0 else np.datetime64("NaT") for i in index]
        chosen = np.array([w for w in when if not np.isnat(w)])
        spread = window_spread_days(chosen, np.ones(chosen.size, bool)) if chosen.size else 0.0
        values.attrs["target_doy"] = target
    warn_window(window, all_years, all_counts, spread)
    order = [d if d != "time" else "year" for d in cube.dims]
    out = values.transpose(*order).astype(dtype)
    out = out.assign_coords(
        year=("year", years, {"long_name": "year (with a window across the new year: the year its season starts)"}),
        time=("year", np.array(when, dtype="datetime64[ns]"), {"long_name": "date of the composite"}),
        n_dates=("year", n_dates.astype(np.int32), {"long_name": "dates in the window"}),
        n_obs=(order, counts.transpose(*order).data, {"long_name": "valid observations behind the value"}))
    out.attrs = {**cube.attrs, **values.attrs, "composite": method.value, "window": window.describe()}
    out.name = cube.name
    return out


def _method(method) -> CompositeMethod:
    try:
        return CompositeMethod(method)
    except ValueError:
        raise InputError(f"unknown composite method {method!r}; use one of: "
                         f"{', '.join(m.value for m in CompositeMethod)}") from None


def _median_date(dates: np.ndarray) -> np.datetime64:
    if dates.size == 0:
        return np.datetime64("NaT")
    days = np.sort(dates.astype("datetime64[D]").astype(np.int64))
    return np.datetime64(int(np.floor(np.median(days))), "D")

