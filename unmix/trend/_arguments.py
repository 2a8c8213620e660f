"""Argument handling shared by the trend kernels (private): series to a C-contiguous float64
``(n_series, n_time)`` block, time vectors in decimal years, output dtypes, chunking."""

from __future__ import annotations

import math

import numba
import numpy as np

from unmix.errors import InputError, SeriesTooLongError, ShapeError

#: Longest series [time steps] for the methods that hold every pairwise slope of a series at once
#: (Sen slope, and the Mann-Kendall corrections that detrend with it): n (n - 1) / 2 float64 slopes,
#: twice (values and selection scratch), about 0.5 GiB per running thread at this length. Satellite
#: records of a few thousand dates stay well below it.
MAX_PAIRWISE_LENGTH = 8192


def _series(y, axis, name="y"):
    """Move ``axis`` last and return a C-contiguous float64 (n_series, n_time) array."""
    y = np.asarray(y)
    if y.ndim == 0:
        raise ShapeError(f"{name} must have a time axis; got a scalar. Pass an array shaped (..., time).")
    if not (np.issubdtype(y.dtype, np.floating) or np.issubdtype(y.dtype, np.integer)
            or y.dtype == np.bool_):
        raise InputError(f"{name} must hold numbers; got dtype {y.dtype}.")
    try:
        y = np.moveaxis(y, axis, -1)
    except np.exceptions.AxisError as err:
        raise ShapeError(f"axis={axis} does not exist for {name} with shape {y.shape}; "
                         "pass the index of the time axis.") from err
    lead = y.shape[:-1]
    y2 = np.ascontiguousarray(y.reshape(math.prod(lead), y.shape[-1]), dtype=np.float64)
    if np.isinf(y2).any():
        raise InputError(f"{name} contains infinite values; mark missing values with NaN instead.")
    return y2, lead


def _check_pairwise_length(nt, method):
    """Refuse a time axis whose pairwise slopes would not fit in bounded memory."""
    if nt > MAX_PAIRWISE_LENGTH:
        gib = nt * (nt - 1) / 2 * 8 * 2 / 2**30
        raise SeriesTooLongError(
            f"{method} needs every pairwise slope of a series: {nt} time steps would take {gib:,.0f} GiB per "
            f"thread; the limit is {MAX_PAIRWISE_LENGTH} steps. Aggregate the series (e.g. to monthly or "
            "annual values) first, or use the Mann-Kendall test with correction 'none' or 'prewhiten', which "
            "needs no pairwise slopes.")


def _out_float(y):
    dt = np.asarray(y).dtype
    return np.float32 if dt == np.float32 else np.float64


def _times(t, n):
    """Return (order, sorted t) for a 1-d time vector of length n, or None for the default."""
    if t is None:
        return None, np.arange(n, dtype=np.float64)
    try:
        t = np.asarray(t)
        if t.dtype.kind in "mMOU":
            raise TypeError(t.dtype)
        t = t.astype(np.float64)
    except (TypeError, ValueError) as err:
        raise InputError("t must be numbers in decimal years (e.g. 2019.5), not dates; convert "
                         "the dates first.") from err
    if t.ndim != 1 or t.shape[0] != n:
        raise ShapeError(f"t must be 1-d with one time per step of the time axis ({n}); "
                         f"got shape {t.shape}.")
    if not np.isfinite(t).all():
        bad = int(np.flatnonzero(~np.isfinite(t))[0])
        raise InputError(f"t must be finite (decimal years); t[{bad}] = {t[bad]}. "
                         "Drop the time step or give it a date.")
    if n > 1 and np.all(t[1:] >= t[:-1]):
        return None, t
    order = np.argsort(t, kind="stable")
    return order, t[order]


def _season_codes(season, n):
    """(dense int64 code of each step's season label, number of seasons) for n time steps."""
    season = np.asarray(season)
    if season.ndim != 1 or season.shape[0] != n:
        raise ShapeError(f"season must be 1-d with one label per time step ({n}); got shape "
                         f"{season.shape}.")
    try:
        labels, codes = np.unique(season, return_inverse=True)
    except TypeError as err:
        raise InputError("season labels must be comparable (all numbers or all strings).") from err
    return np.ascontiguousarray(codes.reshape(-1), dtype=np.int64), len(labels)


def _chunks(n_series):
    """Number of chunks for the outer ``prange`` of a batch kernel: a few per thread (scratch
    buffers are allocated once per chunk)."""
    return max(1, min(n_series, 4 * numba.get_num_threads()))


def _reshape(lead, *arrays):
    return tuple(a.reshape(lead) for a in arrays)
