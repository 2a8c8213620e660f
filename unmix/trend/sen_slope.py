"""Theil-Sen slope with its confidence interval, and the seasonal Sen slope.

:func:`sen_slope` (Theil 1950; Sen 1968; interval after Gilbert 1987) and
:func:`seasonal_sen_slope` (Hirsch, Slack & Smith 1982: pairs within a season only). The Sen slope
uses compiled pairwise slopes and numpy's vectorised sort on blocks of a few hundred series: on
this project's machine its SIMD row sort of ~800 slopes beat a compiled selection of the four
order statistics needed (see ``_sen_blocks``). Compiled kernels: :mod:`._sen_slope_numba`.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numba
import numpy as np
from scipy.special import ndtri

from unmix.errors import InputError

from . import _sen_slope_numba as _nb
from ._arguments import _check_pairwise_length, _chunks, _out_float, _reshape, _season_codes, _series, _times

__all__ = ["SenSlopeResult", "sen_slope", "seasonal_sen_slope"]


@dataclass(frozen=True)
class SenSlopeResult:
    """Result of :func:`sen_slope`; every field has the leading shape.

    Attributes
    ----------
    slope : (...) ndarray
        Theil-Sen slope [units of y per unit of t; per year for t in decimal years].
    intercept : (...) ndarray
        ``median(y) - slope * median(t)`` [units of y].
    low, high : (...) ndarray
        Bounds of the confidence interval of the slope [as slope].
    """

    slope: np.ndarray
    intercept: np.ndarray
    low: np.ndarray
    high: np.ndarray


def _normal_quantile(confidence):
    """z_{(1-confidence)/2} (negative) after checking the confidence level."""
    if not (isinstance(confidence, (int, float, np.floating)) and 0.5 < confidence < 1):
        raise InputError(f"confidence must be a confidence level between 0.5 and 1 (e.g. 0.95); "
                         f"got {confidence!r}. It is not the significance level.")
    return float(ndtri((1.0 - confidence) / 2.0))


def sen_slope(y, t=None, *, axis=-1, confidence=0.95):
    """Theil-Sen slope with its confidence interval, per series.

    Parameters
    ----------
    y : (..., time) array_like
        Series; NaN = missing, dropped per series.
    t : (time,) array_like, optional
        Time of each step [decimal years], so the slope is per year; irregular spacing allowed.
        Default ``0 .. n-1`` (positions on the original axis, so gaps keep their length).
    axis : int, default -1
        Time axis of ``y``.
    confidence : float, default 0.95
        Confidence level of the interval (not a significance level), in (0.5, 1).

    Returns
    -------
    SenSlopeResult
        ``slope`` = median of (y_j - y_i) / (t_j - t_i) over pairs with t_j != t_i; ``intercept``
        = median(y) - slope * median(t) (Conover 1980); ``low``/``high`` = the order statistics of
        the pairwise slopes at ranks M1 = (N' - C)/2 and M2 = (N' + C)/2 + 1 with
        C = z_{1-alpha/2} sqrt(Var S) (Gilbert 1987; Sen 1968 eq. 2.6, Var S with ties in y and t),
        rounded as ``scipy.stats.theilslopes``. float32 for float32 input, else float64. NaN when
        no pair of valid values has distinct times.

    References
    ----------
    Theil, H. (1950). A rank-invariant method of linear and polynomial regression analysis.
    Proc. Koninklijke Nederlandse Akademie van Wetenschappen 53, 386-392, 521-525, 1397-1412.
    Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's tau. Journal of
    the American Statistical Association 63(324), 1379-1389.
    https://doi.org/10.1080/01621459.1968.10480934
    Gilbert, R. O. (1987). Statistical Methods for Environmental Pollution Monitoring. Wiley.
    Conover, W. J. (1980). Practical Nonparametric Statistics, 2nd ed. Wiley.

    Examples
    --------
    >>> import numpy as np
    >>> from unmix.trend import sen_slope
    >>> r = sen_slope(np.array([0.30, 0.28, 0.27, 0.25, 0.22]), t=[2015.0, 2016, 2017, 2018, 2019])
    >>> round(float(r.slope), 3)
    -0.02
    """
    zq = _normal_quantile(confidence)
    dt = _out_float(y)
    y2, lead = _series(y, axis)
    nt = y2.shape[1]
    _check_pairwise_length(nt, "the Sen slope")
    order, ts = _times(t, nt)
    if order is not None:
        y2 = np.ascontiguousarray(y2[:, order])
    ns = y2.shape[0]
    out = [np.empty(ns) for _ in range(4)]
    if ns:
        _sen_blocks(y2, np.ascontiguousarray(ts), zq, out)
    return SenSlopeResult(*_reshape(lead, *(o.astype(dt, copy=False) for o in out)))


def _sen_blocks(y2, ts, zq, out):
    """Sen slopes block by block: compiled pairwise slopes, numpy's vectorised row sort, compiled
    pick of the order statistics. Measured with 780 slopes per series (40 steps, AVX-512 machine,
    numpy 2.4): numpy's row sort 3-4 us per series; one compiled quickselect 6-7 us per rank
    (four ranks needed: median pair and two interval ranks); numpy's SIMD ``partition`` 3 us for
    one rank but 20 us for four. So the sort stays; the single medians inside the Mann-Kendall
    corrections use a sampled-band selection instead (``_median_numba._median_band``).
    One thread per numba thread, each reusing one cache-sized buffer over its share of the
    series; the compiled steps and the sort release the GIL."""
    ns, nt = y2.shape
    npair = max(1, nt * (nt - 1) // 2)
    rows = int(min(ns, max(16, 250_000 // npair)))  # about 2 MB of slopes per block
    t_distinct = bool(nt < 2 or np.all(ts[1:] > ts[:-1]))
    workers = max(1, min(numba.get_num_threads(), -(-ns // rows)))
    bounds = np.linspace(0, ns, workers + 1).astype(int)

    def run(w):
        slopes = np.empty((rows, npair))
        info = np.empty((rows, 5))
        for lo in range(bounds[w], bounds[w + 1], rows):
            hi = min(bounds[w + 1], lo + rows)
            sl, inf = slopes[: hi - lo], info[: hi - lo]
            _nb.sen_pairs_block(y2[lo:hi], ts, t_distinct, zq, sl, inf)
            sl.sort(axis=1)
            _nb.sen_pick_block(sl, inf, *(o[lo:hi] for o in out))

    if workers == 1:
        run(0)
    else:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            list(pool.map(run, range(workers)))


def seasonal_sen_slope(y, season, t=None, *, axis=-1, confidence=0.95):
    """Seasonal Kendall slope estimator: median of the pairwise slopes within each season.

    Parameters
    ----------
    y : (..., time) array_like
        Series; NaN = missing, dropped per series.
    season : (time,) array_like
        Season label of each step (month, phenological phase... any hashable labels).
    t : (time,) array_like, optional
        Time of each step [decimal years], so the slope is per year; irregular spacing allowed.
        Default ``0 .. n-1`` (slope per step).
    axis : int, default -1
        Time axis of ``y``.
    confidence : float, default 0.95
        Confidence level of the interval, in (0.5, 1).

    Returns
    -------
    SenSlopeResult
        ``slope`` = median of (y_j - y_i) / (t_j - t_i) over the pairs i < j of valid values in the
        same season with t_j != t_i (pairs across seasons are not used, so a seasonal cycle does
        not bias the slope); ``intercept`` = median(y) - slope * median(t) over all valid values;
        ``low``/``high`` = order statistics of the within-season slopes at the ranks of
        :func:`sen_slope`, with N' the number of within-season slopes and Var S = sum over seasons
        of the tie-corrected Var S_g (no covariance between seasons, as in the seasonal Kendall
        test). float32 for float32 input, else float64. NaN when no season holds two valid
        values at distinct times.

    Notes
    -----
    With monthly steps and ``t`` in decimal years, the within-season pairs are whole years apart,
    so the slope is the slope per year of Hirsch et al. (1982), which they give in units per
    season cycle. The interval follows the Sen interval with the seasonal variance (Gilbert 1987,
    chapter 17, from memory).

    References
    ----------
    Hirsch, R. M., Slack, J. R., Smith, R. A. (1982). Techniques of trend analysis for monthly water
    quality data. Water Resources Research 18(1), 107-121. https://doi.org/10.1029/WR018i001p00107
    Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's tau. Journal of
    the American Statistical Association 63(324), 1379-1389.
    https://doi.org/10.1080/01621459.1968.10480934
    Gilbert, R. O. (1987). Statistical Methods for Environmental Pollution Monitoring. Wiley.

    Examples
    --------
    >>> import numpy as np
    >>> from unmix.trend import seasonal_sen_slope
    >>> t = 2015 + np.arange(48) / 12
    >>> y = 0.3 + 0.1 * np.sin(2 * np.pi * t) - 0.01 * (t - 2015)
    >>> r = seasonal_sen_slope(y, season=np.arange(48) % 12, t=t)
    >>> round(float(r.slope), 4)
    -0.01
    """
    zq = _normal_quantile(confidence)
    dt = _out_float(y)
    y2, lead = _series(y, axis)
    nt = y2.shape[1]
    _check_pairwise_length(nt, "the Sen slope")
    codes, n_seasons = _season_codes(season, nt)
    order, ts = _times(t, nt)
    if order is not None:
        y2 = np.ascontiguousarray(y2[:, order])
        codes = np.ascontiguousarray(codes[order])
    ns = y2.shape[0]
    out = [np.empty(ns) for _ in range(4)]
    if ns:
        _nb.seasonal_sen_batch(y2, np.ascontiguousarray(ts), codes, n_seasons, zq, _chunks(ns), *out)
    return SenSlopeResult(*_reshape(lead, *(o.astype(dt, copy=False) for o in out)))
