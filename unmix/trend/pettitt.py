"""Pettitt (1979) test for a single change point in the level of a series.

Compiled kernel: :mod:`._pettitt_numba`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._arguments import _chunks, _reshape, _series
from ._pettitt_numba import pettitt_batch

__all__ = ["PettittResult", "pettitt"]


@dataclass(frozen=True)
class PettittResult:
    """Result of :func:`pettitt`; every field has the leading shape.

    Attributes
    ----------
    k : (...) float64 ndarray
        Pettitt statistic K = max |U_t|.
    index : (...) float64 ndarray
        0-based position, on the original time axis, of the last value before the change; NaN where
        no change point is defined (fewer than 3 values, or K = 0). Float so that NaN can mark
        those series: mask them, then ``index.astype(int)``.
    p_value : (...) float64 ndarray
        Approximate p-value ``2 exp(-6 K^2 / (n^3 + n^2))``, capped at 1.
    """

    k: np.ndarray
    index: np.ndarray
    p_value: np.ndarray


def pettitt(y, *, axis=-1):
    """Pettitt test for a single change point in the level of a series.

    Parameters
    ----------
    y : (..., time) array_like
        Series in time order; NaN = missing, dropped per series.
    axis : int, default -1
        Time axis of ``y``.

    Returns
    -------
    PettittResult
        ``k`` = K = max_t |U_t| with U_t = sum_{i<=t} sum_{j>t} sgn(x_i - x_j) over the valid values;
        ``index`` = position on the ORIGINAL time axis of the last value before the change (first
        t reaching K; NaN if K = 0 or fewer than 3 valid values); ``p_value`` =
        min(1, 2 exp(-6 K^2 / (n^3 + n^2))), an approximation good for small p.

    References
    ----------
    Pettitt, A. N. (1979). A non-parametric approach to the change-point problem. Journal of the
    Royal Statistical Society C (Applied Statistics) 28(2), 126-135. https://doi.org/10.2307/2346729

    Examples
    --------
    >>> import numpy as np
    >>> from unmix.trend import pettitt
    >>> r = pettitt(np.r_[np.zeros(10), np.ones(10)])
    >>> float(r.k), int(r.index), round(float(r.p_value), 5)
    (100.0, 9, 0.00158)
    """
    y2, lead = _series(y, axis)
    ns = y2.shape[0]
    k, idx, p = (np.empty(ns) for _ in range(3))
    if ns:
        pettitt_batch(y2, _chunks(ns), k, idx, p)
    return PettittResult(*_reshape(lead, k, idx, p))
