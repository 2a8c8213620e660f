"""Phenological windows and annual composites: compare each year's series at the same time of year.

A trend over a record whose dates fall in different seasons from year to year mixes phenology into
the trend. These kernels choose the dates of a day-of-year window (wrapping over the new year for
southern-hemisphere summers, e.g. days 335-60 for December-February), of chosen years and of a date
range, and reduce each year to one composite inside the window: the per-pixel median of the valid
observations, or the valid observation closest to a target day. The seasonal Kendall test
(:mod:`unmix.trend`) remains the path for records that keep every season.

A *year* of a window that wraps over the new year is the season that starts in it: with days
335-60, 2009-12-20 and 2010-02-10 both belong to year 2009 (the 2009/10 season).

numpy only (numba for the per-pixel composites); dates are ``datetime64`` arrays.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import EmptyWindowYearWarning, InputError, ShapeError, WindowSpreadWarning
from ._phenology_numba import _closest_groups, _median_groups

__all__ = [
    "DateWindow",
    "day_of_year",
    "day_of_year_window",
    "season_years",
    "select_dates",
    "year_groups",
    "check_date_count",
    "circular_day_difference",
    "median_composite",
    "closest_composite",
    "window_spread_days",
    "warn_window",
    "DAYS_PER_YEAR",
]

#: Period [days] of the circular day-of-year difference (the mean Gregorian year).
DAYS_PER_YEAR = 365.2425


@dataclass(frozen=True)
class DateWindow:
    """Which dates a comparison uses.

    Parameters
    ----------
    doy_window : (int, int), optional
        First and last day of year (1-366), inclusive; a start after the end wraps over the new
        year (``(335, 60)``: December to February).
    years : sequence of int, optional
        Years kept (with a wrapping window: the years its seasons start in).
    date_range : (date or None, date or None), optional
        First and last date kept, inclusive (``"2005-01-01"``, ``None`` for open).
    max_spread_days : float, optional
        Warn when the years' typical in-window days lie further apart than this [days]
        (:func:`window_spread_days`); None: no check.

    Examples
    --------
    >>> DateWindow(doy_window=(335, 60), years=(2005, 2006)).describe()
    'days of year 335-60 (across the new year), years 2005, 2006'
    """

    doy_window: tuple[int, int] | None = None
    years: tuple[int, ...] | None = None
    date_range: tuple[str | None, str | None] | None = None
    max_spread_days: float | None = None

    def __post_init__(self) -> None:
        if self.doy_window is not None:
            start, end = _check_doy_window(self.doy_window)
            object.__setattr__(self, "doy_window", (start, end))
        if self.years is not None:
            object.__setattr__(self, "years", tuple(sorted({int(y) for y in self.years})))
        if self.date_range is not None:
            object.__setattr__(self, "date_range", _check_range(self.date_range))
        if self.max_spread_days is not None and not float(self.max_spread_days) >= 0:
            raise InputError(f"max_spread_days must be a number of days >= 0, got {self.max_spread_days}")

    @property
    def wraps(self) -> bool:
        """True when the day-of-year window runs over the new year."""
        return self.doy_window is not None and self.doy_window[0] > self.doy_window[1]

    def describe(self) -> str:
        """One line saying which dates the window keeps (for logs, reports and attributes)."""
        parts = []
        if self.doy_window is not None:
            start, end = self.doy_window
            parts.append(f"days of year {start}-{end}" + (" (across the new year)" if self.wraps else ""))
        if self.years is not None:
            parts.append("years " + ", ".join(str(y) for y in self.years))
        if self.date_range is not None:
            first, last = self.date_range
            parts.append(f"dates {first or 'start'} to {last or 'end'}")
        return ", ".join(parts) if parts else "all dates"


def _check_doy_window(window) -> tuple[int, int]:
    try:
        start, end = (int(v) for v in window)
    except (TypeError, ValueError):
        raise InputError(f"a day-of-year window is two days (start, end), got {window!r}") from None
    for name, day in (("start", start), ("end", end)):
        if not 1 <= day <= 366:
            raise InputError(f"day-of-year window {name} must be 1-366, got {day}")
    return start, end


def _check_range(date_range) -> tuple[str | None, str | None]:
    try:
        first, last = date_range
    except (TypeError, ValueError):
        raise InputError(f"a date range is two dates (first, last; None for open), got {date_range!r}") from None
    out = []
    for v in (first, last):
        if v is None or (isinstance(v, str) and not v.strip()):
            out.append(None)
            continue
        try:
            out.append(str(np.datetime64(v, "D")))
        except ValueError:
            raise InputError(f"date range bound {v!r} is not a date; write it as YYYY-MM-DD") from None
    if out[0] is not None and out[1] is not None and out[0] > out[1]:
        raise InputError(f"date range starts {out[0]}, after its end {out[1]}; swap the two dates")
    return out[0], out[1]


def _as_days(dates) -> np.ndarray:
    d = np.asarray(dates)
    if d.dtype.kind in "US":
        d = d.astype("datetime64[D]")
    if not np.issubdtype(d.dtype, np.datetime64):
        raise InputError(f"dates must be real dates (datetime64), got dtype {d.dtype}")
    if np.isnat(d).any():
        raise InputError("dates hold a missing date (NaT); drop that time step or give it its date")
    return d.astype("datetime64[D]")


def day_of_year(dates) -> np.ndarray:
    """Day of year (1 = 1 January, 366 = 31 December of a leap year) of each date.

    Examples
    --------
    >>> day_of_year(np.array(["2020-12-31", "2021-12-31", "2021-03-01"], "datetime64[D]")).tolist()
    [366, 365, 60]
    """
    d = _as_days(dates)
    return ((d - d.astype("datetime64[Y]").astype("datetime64[D]")).astype(np.int64) + 1).astype(np.int64)


def day_of_year_window(doy, start: int, end: int) -> np.ndarray:
    """Mask of the days of year inside the window ``start``-``end`` (inclusive; wraps when start > end).

    Examples
    --------
    >>> day_of_year_window(np.array([1, 60, 61, 334, 335, 366]), 335, 60).tolist()
    [True, True, False, False, True, True]
    """
    start, end = _check_doy_window((start, end))
    doy = np.asarray(doy)
    if start <= end:
        return (doy >= start) & (doy <= end)
    return (doy >= start) | (doy <= end)


def season_years(dates, doy_window: tuple[int, int] | None = None) -> np.ndarray:
    """The year each date counts for: its calendar year, or for a wrapping window the season's start year.

    Examples
    --------
    >>> season_years(np.array(["2009-12-20", "2010-02-10", "2010-07-01"], "datetime64[D]"), (335, 60)).tolist()
    [2009, 2009, 2010]
    """
    d = _as_days(dates)
    year = d.astype("datetime64[Y]").astype(np.int64) + 1970
    if doy_window is not None:
        start, end = _check_doy_window(doy_window)
        if start > end:
            year = year - (day_of_year(d) <= end)
    return year


def select_dates(dates, *, doy_window=None, years=None, date_range=None) -> tuple[np.ndarray, np.ndarray]:
    """Which dates a window keeps, and for each date left out the reason why.

    Parameters
    ----------
    dates : (n_time,) datetime64 array_like
    doy_window, years, date_range
        As in :class:`DateWindow` (or pass a :class:`DateWindow`'s fields).

    Returns
    -------
    mask : (n_time,) bool ndarray
        True for the dates kept.
    reasons : (n_time,) str ndarray
        "" for a kept date, else the first reason that applies, in the order date range, day-of-year
        window, year: ``"before 2005-01-01"``, ``"after 2012-12-31"``,
        ``"outside day-of-year window 335-60"``, ``"year 2009 not selected"`` (with a wrapping window
        ``"season 2009/10 not selected"``).

    Examples
    --------
    >>> d = np.array(["2004-12-30", "2005-01-10", "2005-06-01", "2006-01-05"], "datetime64[D]")
    >>> mask, why = select_dates(d, doy_window=(335, 60), years=[2004], date_range=("2005-01-01", None))
    >>> mask.tolist(), why.tolist()
    ([False, True, False, False], ['before 2005-01-01', '', 'outside day-of-year window 335-60', 'season 2005/06 not selected'])
    """
    window = DateWindow(doy_window=doy_window, years=years, date_range=date_range)
    d = _as_days(dates)
    reasons = np.full(d.shape, "", dtype=object)
    free = np.ones(d.shape, bool)

    def leave_out(where, text):
        hit = free & where
        reasons[hit] = text if isinstance(text, str) else text[hit]
        free[hit] = False

    if window.date_range is not None:
        first, last = window.date_range
        if first is not None:
            leave_out(d < np.datetime64(first, "D"), f"before {first}")
        if last is not None:
            leave_out(d > np.datetime64(last, "D"), f"after {last}")
    if window.doy_window is not None:
        start, end = window.doy_window
        leave_out(~day_of_year_window(day_of_year(d), start, end), f"outside day-of-year window {start}-{end}")
    if window.years is not None:
        yr = season_years(d, window.doy_window)
        if window.wraps:
            text = np.array([f"season {y}/{(y + 1) % 100:02d} not selected" for y in yr], dtype=object)
        else:
            text = np.array([f"year {y} not selected" for y in yr], dtype=object)
        leave_out(~np.isin(yr, window.years), text)
    return free, reasons.astype(str)


def year_groups(dates, mask, window: DateWindow | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Group index of each kept date by (season) year, and the years of the groups.

    The years run from the first to the last kept year (or are the window's ``years``), so a year
    without a kept date is a group of its own with no member.

    Returns
    -------
    groups : (n_time,) int64 ndarray
        Index into ``years``; -1 for dates not kept.
    years : (n_groups,) int64 ndarray
    """
    window = window or DateWindow()
    yr = season_years(dates, window.doy_window)
    mask = np.asarray(mask, bool)
    if window.years is not None:
        years = np.asarray(window.years, np.int64)
    elif mask.any():
        years = np.arange(yr[mask].min(), yr[mask].max() + 1, dtype=np.int64)
    else:
        years = np.zeros(0, np.int64)
    groups = np.full(yr.shape, -1, np.int64)
    if years.size:
        idx = np.searchsorted(years, yr)
        hit = mask & (idx < years.size) & (years[np.minimum(idx, years.size - 1)] == yr)
        groups[hit] = idx[hit]
    return groups, years


def check_date_count(n_found: int, n_needed: int, what: str = "the window", unit: str = "dates") -> None:
    """Raise :class:`~unmix.errors.InputError` when fewer than ``n_needed`` dates (or years) were chosen."""
    if int(n_found) < int(n_needed):
        raise InputError(
            f"{what} selects {int(n_found)} {unit}; the trend tests need at least {int(n_needed)}: widen the "
            "day-of-year window, add years or lengthen the date range")


def circular_day_difference(a, b, period: float = DAYS_PER_YEAR) -> np.ndarray:
    """Distance [days] between days of year on a circle of ``period`` days (0 to period / 2).

    Examples
    --------
    >>> circular_day_difference(np.array([1, 365, 180]), 360, period=365).tolist()
    [6.0, 5.0, 180.0]
    """
    diff = np.abs(np.asarray(a, np.float64) - np.asarray(b, np.float64)) % period
    return np.minimum(diff, period - diff)


def _group_plan(groups, n_time: int, n_groups: int | None):
    groups = np.asarray(groups, np.int64)
    if groups.shape != (n_time,):
        raise ShapeError(f"groups must hold one group per date ({n_time}), got shape {groups.shape}")
    if n_groups is None:
        n_groups = int(groups.max()) + 1 if groups.size else 0
    if groups.size and groups.max() >= n_groups:
        raise ShapeError(f"group {int(groups.max())} is out of range for {n_groups} groups")
    kept = np.flatnonzero(groups >= 0)
    order = kept[np.argsort(groups[kept], kind="stable")]
    starts = np.searchsorted(groups[order], np.arange(n_groups + 1)).astype(np.int64)
    return order.astype(np.int64), starts, n_groups


def _flat(values):
    values = np.asarray(values)
    if values.ndim < 1:
        raise ShapeError("values must have time as their last axis, got a scalar")
    dtype = values.dtype if values.dtype in (np.float32, np.float64) else np.float64
    return np.ascontiguousarray(values.reshape(-1, values.shape[-1]), dtype=np.float64), dtype


def median_composite(values, groups, n_groups: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Per-pixel median of the valid observations of each group (year).

    Parameters
    ----------
    values : (..., n_time) float ndarray
        NaN = no data.
    groups : (n_time,) int array_like
        Group of each date (0 .. n_groups - 1); -1 leaves a date out.
    n_groups : int, optional
        Number of groups (default: the largest group + 1).

    Returns
    -------
    composite : (..., n_groups) ndarray, the input's float dtype
        NaN where a group has no valid value.
    counts : (..., n_groups) int32 ndarray
        Valid observations behind each composite value.

    Examples
    --------
    >>> median_composite(np.array([1.0, 3.0, np.nan, 2.0, 5.0]), [0, 0, 0, 1, -1])[0].tolist()
    [2.0, 2.0]
    """
    flat, dtype = _flat(values)
    order, starts, n_groups = _group_plan(groups, flat.shape[1], n_groups)
    out = np.empty((flat.shape[0], n_groups), np.float64)
    counts = np.empty((flat.shape[0], n_groups), np.int32)
    _median_groups(flat, order, starts, out, counts)
    shape = np.shape(values)[:-1] + (n_groups,)
    return out.astype(dtype).reshape(shape), counts.reshape(shape)


def closest_composite(values, doy, groups, target_doy: float, n_groups: int | None = None, *,
                      return_index: bool = False):
    """Per pixel and group, the valid observation whose day of year is closest to ``target_doy``.

    The distance is circular (:func:`circular_day_difference`): day 364 is 3 days from day 2. Of two
    equally close observations the earlier one is taken.

    Parameters
    ----------
    values : (..., n_time) float ndarray
        NaN = no data.
    doy : (n_time,) array_like
        Day of year of each date (:func:`day_of_year`).
    groups, n_groups
        As in :func:`median_composite`.
    target_doy : float
        The day of year to aim at (1-366).
    return_index : bool
        Also return the time index of each chosen observation (-1 where none).

    Returns
    -------
    composite : (..., n_groups) ndarray
    counts : (..., n_groups) int32 ndarray
    index : (..., n_groups) int64 ndarray, only with ``return_index``

    Examples
    --------
    >>> closest_composite(np.array([1.0, 2.0, 3.0]), [350, 10, 40], [0, 0, 0], 5)[0].tolist()
    [2.0]
    """
    if not 1 <= float(target_doy) <= 366:
        raise InputError(f"target day of year must be 1-366, got {target_doy}")
    flat, dtype = _flat(values)
    doy = np.asarray(doy, np.float64)
    if doy.shape != (flat.shape[1],):
        raise ShapeError(f"doy must hold one day per date ({flat.shape[1]}), got shape {doy.shape}")
    order, starts, n_groups = _group_plan(groups, flat.shape[1], n_groups)
    distance = circular_day_difference(doy, target_doy)
    out = np.empty((flat.shape[0], n_groups), np.float64)
    counts = np.empty((flat.shape[0], n_groups), np.int32)
    chosen = np.empty((flat.shape[0], n_groups), np.int64)
    _closest_groups(flat, distance, order, starts, out, counts, chosen)
    shape = np.shape(values)[:-1] + (n_groups,)
    result = (out.astype(dtype).reshape(shape), counts.reshape(shape))
    return result + (chosen.reshape(shape),) if return_index else result


def window_spread_days(dates, mask, groups=None) -> float:
    """How far apart [days] the years' typical in-window days lie: 0 when every year is sampled alike.

    Each kept date's day of year is placed on the year circle relative to the circular mean of all
    kept days; each group (year) is represented by the median of its offsets, and the spread is the
    largest minus the smallest of those medians. Without ``groups`` the years are the dates'
    calendar years.

    Examples
    --------
    >>> d = np.array(["2001-01-10", "2002-01-20", "2002-12-25"], "datetime64[D]")
    >>> round(window_spread_days(d, [True, True, True], groups=[0, 1, 1]), 1)
    3.1
    """
    d = _as_days(dates)
    mask = np.asarray(mask, bool)
    if groups is None:
        groups = np.where(mask, d.astype("datetime64[Y]").astype(np.int64), -1)
    groups = np.where(mask, np.asarray(groups, np.int64), -1)
    if not (groups >= 0).any():
        return 0.0
    doy = day_of_year(d).astype(np.float64)
    angle = 2 * np.pi * doy / DAYS_PER_YEAR
    kept = groups >= 0
    centre = np.arctan2(np.sin(angle[kept]).mean(), np.cos(angle[kept]).mean()) * DAYS_PER_YEAR / (2 * np.pi)
    offset = (doy - centre + DAYS_PER_YEAR / 2) % DAYS_PER_YEAR - DAYS_PER_YEAR / 2
    medians = [np.median(offset[groups == g]) for g in np.unique(groups[kept])]
    return float(max(medians) - min(medians))


def warn_window(window: DateWindow, years: Sequence[int], dates_per_year: Sequence[int],
                spread_days: float | None = None) -> None:
    """Warn about years without a date in the window and, with ``max_spread_days``, a wide spread.

    Issues :class:`~unmix.errors.EmptyWindowYearWarning` naming the empty years and
    :class:`~unmix.errors.WindowSpreadWarning` when ``spread_days`` exceeds the window's
    ``max_spread_days``.
    """
    empty = [int(y) for y, n in zip(years, dates_per_year) if int(n) == 0]
    if empty:
        warnings.warn(f"no observation in the window ({window.describe()}) in year(s) "
                      f"{', '.join(map(str, empty))}: their composites are missing; widen the window or accept "
                      "the gaps", EmptyWindowYearWarning, stacklevel=3)
    limit = window.max_spread_days
    if limit is not None and spread_days is not None and spread_days > float(limit):
        warnings.warn(f"the window's dates ({window.describe()}) differ by {spread_days:.0f} days between years, "
                      f"more than the {float(limit):g} allowed: years compare different stages of the season; "
                      "narrow the window or use a composite closest to a target day", WindowSpreadWarning,
                      stacklevel=3)
