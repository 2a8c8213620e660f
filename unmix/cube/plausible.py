"""Physically plausible reflectance: values outside a set range are no data, and are counted.

A reflectance far outside 0..1 after scaling is not a surface: an undeclared fill value (``1e30``,
``3.4e38``, ``-9999`` read without its scale), a wrong scale factor or a saturated detector. Left in,
such a value drags the mixture model to a vertex of the simplex with a huge residual, or, with
other constraints, to fractions far outside 0..1 that would count as valid observations. The cube
layer therefore masks a pixel on a date (all its bands) when any band lies outside ``valid_range``,
and counts the masked pixels of each date so that the commands can say which dates were affected.

The default range, -0.5..2, is wide on purpose (common practice, our choice): surface reflectance
products carry small negative values over dark targets and values above 1 over snow, specular glint
and bright clouds, none of which should be masked here; quality masks handle those.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numba
import numpy as np
import xarray as xr

from ..errors import InputError

__all__ = ["DEFAULT_VALID_RANGE", "check_valid_range", "screen_block", "implausible_counts"]

#: Default plausible reflectance range [reflectance] after scaling (both ends allowed).
DEFAULT_VALID_RANGE = (-0.5, 2.0)


def check_valid_range(valid_range: Sequence[float] | None) -> tuple[float, float] | None:
    """``valid_range`` as a (low, high) pair of finite floats with low < high, or None (no screening)."""
    if valid_range is None:
        return None
    try:
        lo, hi = (float(v) for v in valid_range)
    except (TypeError, ValueError):
        raise InputError(f"valid_range must be two numbers (low, high) in reflectance, got {valid_range!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
        raise InputError(f"valid_range must be finite with low < high, got ({lo}, {hi}); e.g. (-0.5, 2)")
    return lo, hi


@numba.njit(cache=True, nogil=True)
def _flag_outside(values, lo, hi, flags):  # pragma: no cover - compiled
    """flags[i] = some finite band of pixel i lies outside [lo, hi]; returns the number flagged."""
    n = 0
    for i in range(values.shape[0]):
        bad = False
        for j in range(values.shape[1]):
            v = values[i, j]
            if v < lo or v > hi:  # False for NaN: no data stays no data, uncounted
                bad = True
        flags[i] = bad
        n += bad
    return n


def screen_block(block: np.ndarray, valid_range: tuple[float, float] | None) -> tuple[np.ndarray, np.ndarray]:
    """Mask implausible pixels of one chunk.

    Parameters
    ----------
    block : (..., band) ndarray
        Reflectance of one chunk, band last.
    valid_range : (low, high) or None
        Plausible range [reflectance]; None screens nothing.

    Returns
    -------
    block : (..., band) ndarray
        ``block`` itself when no pixel is flagged (no copy), else a copy with every band of the
        flagged pixels set to NaN.
    flags : (...) bool ndarray
        True where the pixel had a finite band outside the range.

    Examples
    --------
    >>> b = np.array([[0.1, 0.2], [1e30, 0.2], [np.nan, 0.3]], dtype=np.float32)
    >>> out, flags = screen_block(b, (-0.5, 2.0))
    >>> flags.tolist(), bool(np.isnan(out[1]).all()), out is b
    ([False, True, False], True, False)
    """
    flags = np.zeros(block.shape[:-1], dtype=np.bool_)
    if valid_range is None or block.size == 0:
        return block, flags
    lo, hi = valid_range
    flat = block.reshape(-1, block.shape[-1]) if block.flags.c_contiguous else \
        np.ascontiguousarray(block).reshape(-1, block.shape[-1])
    if _flag_outside(flat, lo, hi, flags.reshape(-1)) == 0:
        return block, flags
    out = np.array(block, copy=True)
    out[flags] = np.nan
    return out, flags


def implausible_counts(flags: xr.DataArray, valid_range: tuple[float, float] | None) -> xr.DataArray:
    """Pixels masked per date: (time, y, x) bool flags -> (time,) int32, lazy when the flags are."""
    counts = flags.sum(("y", "x"), dtype=np.int64).astype(np.int32)
    attrs = {"long_name": "pixels masked because a band lay outside the plausible reflectance range",
             "units": "1"}
    if valid_range is not None:
        attrs["valid_range"] = np.array(valid_range, dtype=np.float64)
    return counts.assign_attrs(attrs)
