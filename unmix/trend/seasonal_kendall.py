"""Seasonal Kendall test (Hirsch, Slack & Smith 1982): Mann-Kendall statistics summed over seasons.

Compiled kernel: :mod:`._seasonal_kendall_numba`. The matching slope estimator,
:func:`unmix.trend.seasonal_sen_slope`, sits beside the Sen slope in :mod:`.sen_slope`.
"""

from __future__ import annotations

import numpy as np

from ._arguments import _chunks, _reshape, _season_codes, _series
from ._seasonal_kendall_numba import seasonal_kendall_batch
from .mann_kendall import MannKendallResult

__all__ = ["seasonal_kendall"]


def seasonal_kendall(y, season, *, axis=-1):
    """Seasonal Kendall test: Mann-Kendall statistics summed over seasons.

    Parameters
    ----------
    y : (..., time) array_like
        Series in time order; NaN = missing.
    season : (time,) array_like
        Season label of each step (month, phenological phase... any hashable labels).
    axis : int, default -1
        Time axis of ``y``.

    Returns
    -------
    MannKendallResult
        S = sum_g S_g and Var(S) = sum_g Var(S_g) (tie-corrected, no covariance between seasons);
        ``z`` continuity-corrected, two-sided normal ``p_value``, ``tau`` = S / sum_g n_g(n_g-1)/2,
        ``n`` = valid values over all seasons. NaN statistics when fewer than 3 valid values or no
        season holds two; Z = 0, p = 1 when every within-season pair is tied.

    References
    ----------
    Hirsch, R. M., Slack, J. R., Smith, R. A. (1982). Techniques of trend analysis for monthly water
    quality data. Water Resources Research 18(1), 107-121. https://doi.org/10.1029/WR018i001p00107

    Examples
    --------
    >>> import numpy as np
    >>> from unmix.trend import seasonal_kendall
    >>> t = np.arange(48)
    >>> y = np.sin(2 * np.pi * t / 12) + 0.05 * t
    >>> r = seasonal_kendall(y, season=t % 12)
    >>> float(r.s), float(r.tau)
    (72.0, 1.0)
    """
    y2, lead = _series(y, axis)
    nt = y2.shape[1]
    codes, n_seasons = _season_codes(season, nt)
    ns = y2.shape[0]
    s, var, z, p, tau = (np.empty(ns) for _ in range(5))
    n = np.empty(ns, dtype=np.int64)
    if ns:
        seasonal_kendall_batch(y2, codes, n_seasons, _chunks(ns), s, var, z, p, tau, n)
    return MannKendallResult(*_reshape(lead, s, var, z, p, tau, n))
