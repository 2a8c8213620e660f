"""Date helpers shared by the kernels' callers: real dates to decimal years."""

from __future__ import annotations

import numpy as np

from .errors import InputError

__all__ = ["decimal_years", "decimal_years_or_nan"]


def decimal_years(dates) -> np.ndarray:
    """Dates as decimal years: the calendar year plus the elapsed fraction of that year.

    Parameters
    ----------
    dates : array_like of datetime64 (any unit), or strings numpy can parse as dates

    Returns
    -------
    (n,) float64 ndarray
        For example 2020-07-02 (day 183 of a 366-day year) -> 2020.5.

    Examples
    --------
    >>> decimal_years(np.array(["2020-01-01", "2021-07-02"], dtype="datetime64[D]"))
    array([2020.        , 2021.49863014])
    """
    d = np.asarray(dates)
    if d.dtype.kind in "US":
        d = d.astype("datetime64[s]")
    if not np.issubdtype(d.dtype, np.datetime64):
        raise InputError(
            f"time must hold real dates (datetime64), got dtype {d.dtype}; open the product with decoded times"
        )
    if np.isnat(d).any():
        raise InputError("time holds a missing date (NaT); drop that time step or give it its date")
    d = d.astype("datetime64[s]")
    years = d.astype("datetime64[Y]")
    start = years.astype("datetime64[s]")
    length = ((years + 1).astype("datetime64[s]") - start).astype(np.float64)
    return years.astype(np.int64) + 1970 + (d - start).astype(np.float64) / length


def decimal_years_or_nan(dates) -> np.ndarray:
    """:func:`decimal_years` of an array of any shape in which NaT (no date) becomes NaN.

    For maps of dates (a change date per pixel) rather than a time axis, where a missing date is data.

    Examples
    --------
    >>> decimal_years_or_nan(np.array([["2020-07-02", "NaT"]], dtype="datetime64[D]"))
    array([[2020.5,    nan]])
    """
    d = np.asarray(dates)
    out = np.full(d.shape, np.nan)
    have = ~np.isnat(d)
    if have.any():
        out[have] = decimal_years(d[have])
    return out
