"""Monotonic-trend and change-point tests on time series of fractions.

Kernels on ``(..., time)`` arrays: any leading dimensions, time last (or chosen with ``axis``), NaN
marks a missing value and is dropped series by series. Nothing here loops over series in Python; the
work is done by compiled kernels in :mod:`unmix._trend_numba`, in parallel over series (the Sen
slope also uses numpy's vectorised sort on blocks of a few hundred series: on this project's
machine its SIMD row sort of ~800 slopes beat a compiled selection of the four order statistics
needed, see ``_sen_blocks``).

Functions
---------
mann_kendall
    Mann-Kendall test, with optional corrections for serial correlation.
iterative_prewhiten
    The whitened series, autocorrelation and slope behind the ``iterative-prewhiten`` correction.
seasonal_kendall
    Seasonal Kendall test (sum of per-season Mann-Kendall statistics).
sen_slope
    Theil-Sen slope, intercept and its confidence interval.
pettitt
    Pettitt change-point test.
fdr
    False-discovery-rate control over a map of p-values (Benjamini-Hochberg / -Yekutieli).

Dtypes
------
Test statistics and p-values are float64 (``n`` is int64) whatever the input dtype. Slope-like
fields (Sen slope, intercept, interval) keep float32 for float32 input and are float64 otherwise.
"""

from __future__ import annotations

import enum
import math
import functools
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numba
import numpy as np
from scipy.special import ndtri

from unmix import _trend_numba as _nb
from unmix.errors import InputError, ShapeError, UnknownNameError

__all__ = [
    "MannKendallCorrection",
    "FdrMethod",
    "DEFAULT_CORRECTION",
    "MannKendallResult",
    "SenSlopeResult",
    "PettittResult",
    "PrewhitenResult",
    "mann_kendall",
    "iterative_prewhiten",
    "seasonal_kendall",
    "sen_slope",
    "pettitt",
    "fdr",
]


class MannKendallCorrection(str, enum.Enum):
    """How the Mann-Kendall test allows for serial correlation.

    NONE
        The original test (Mann 1945; Kendall 1975), which assumes independent values.
    PREWHITEN
        Lag-1 pre-whitening (von Storch 1995): the test runs on ``x[t] - r1 * x[t-1]``.
    TREND_FREE_PREWHITEN
        Trend-free pre-whitening (Yue et al. 2002): remove the Sen slope, pre-whiten, add it back.
    HAMED_RAO
        Variance correction by the effective sample size of the ranks (Hamed & Rao 1998).
    ITERATIVE_PREWHITEN
        Iterative pre-whitening (Zhang et al. 2000; Wang & Swail 2001): the lag-1 autocorrelation
        is estimated, bias-corrected, on the series with its Sen trend removed, and trend and
        autocorrelation are re-estimated in turn until they converge; the test runs on
        ``(x[t] - r x[t-1]) / (1 - r)``. See :func:`iterative_prewhiten`.
    """

    NONE = "none"
    PREWHITEN = "prewhiten"
    TREND_FREE_PREWHITEN = "trend-free-prewhiten"
    HAMED_RAO = "hamed-rao"
    ITERATIVE_PREWHITEN = "iterative-prewhiten"


class FdrMethod(str, enum.Enum):
    """False-discovery-rate procedure: ``bh`` (Benjamini & Hochberg 1995), ``by`` (Benjamini &
    Yekutieli 2001, valid under any dependence)."""

    BH = "bh"
    BY = "by"


#: Correction used by the ``unmix trends`` command unless the user picks another one. Chosen with
#: ``benchmarks/study_correction.py --series 10000 --seed 1`` (AR(1) series, nominal alpha 0.05).
#: Rule: the best mean power among the corrections whose false-positive rate at phi = 0.6,
#: n = 30 is <= 0.10. Two pass: lag-1 pre-whitening (0.060) and iterative pre-whitening (0.097);
#: none 0.29, trend-free pre-whitening 0.36, Hamed-Rao 0.24 fail. Iterative pre-whitening keeps
#: far more power (phi = 0.6, n = 30: 0.25 against 0.14 for a trend of 1.5 noise sd over the
#: series, 0.57 against 0.28 for 3 sd; mean over all cells 0.56 against 0.36), because plain
#: pre-whitening takes a strong real trend for autocorrelation and whitens it away. Its worst
#: false-positive rate is 0.12 (phi = 0.6, n = 15), against 0.07 for plain pre-whitening.
DEFAULT_CORRECTION = MannKendallCorrection.ITERATIVE_PREWHITEN

_CORRECTION_CODE = {
    MannKendallCorrection.NONE: _nb.NONE,
    MannKendallCorrection.PREWHITEN: _nb.PREWHITEN,
    MannKendallCorrection.TREND_FREE_PREWHITEN: _nb.TREND_FREE_PREWHITEN,
    MannKendallCorrection.HAMED_RAO: _nb.HAMED_RAO,
    MannKendallCorrection.ITERATIVE_PREWHITEN: _nb.ITERATIVE_PREWHITEN,
}


@dataclass(frozen=True)
class MannKendallResult:
    """Result of :func:`mann_kendall` or :func:`seasonal_kendall`; every field has the leading shape.

    Attributes
    ----------
    s : (...) float64 ndarray
        Mann-Kendall score S (number of increasing minus decreasing pairs).
    var_s : (...) float64 ndarray
        Variance of S under no trend, tie-corrected (and corrected for serial correlation by
        ``hamed-rao``).
    z : (...) float64 ndarray
        Continuity-corrected standard normal score.
    p_value : (...) float64 ndarray
        Two-sided p-value (exact permutation value for short series without ties, see
        :func:`mann_kendall`).
    tau : (...) float64 ndarray
        Kendall's tau-a, ``S / (n' (n' - 1) / 2)`` with ``n'`` the length S was computed on.
    n : (...) int64 ndarray
        Number of valid (non-NaN) values in the series.
    """

    s: np.ndarray
    var_s: np.ndarray
    z: np.ndarray
    p_value: np.ndarray
    tau: np.ndarray
    n: np.ndarray


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


@dataclass(frozen=True)
class PrewhitenResult:
    """Result of :func:`iterative_prewhiten`.

    Attributes
    ----------
    series : (..., time) float64 ndarray
        The values the Mann-Kendall test runs on, compacted to the front and NaN after: the
        n - 1 whitened values where ``rho > 0``, else the n valid input values.
    rho : (...) float64 ndarray
        Final bias-corrected lag-1 autocorrelation of the detrended series (0 = not whitened).
    slope : (...) float64 ndarray
        Final Sen slope [units of y per step].
    iterations : (...) int64 ndarray
        Rounds of the iteration (0 for fewer than 5 valid values).
    """

    series: np.ndarray
    rho: np.ndarray
    slope: np.ndarray
    iterations: np.ndarray


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


# ---------------------------------------------------------------------------------------------
# argument handling
# ---------------------------------------------------------------------------------------------
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


def _correction(correction):
    try:
        return MannKendallCorrection(correction)
    except ValueError:
        known = ", ".join(c.value for c in MannKendallCorrection)
        raise UnknownNameError(f"unknown Mann-Kendall correction {correction!r}; use one of: "
                               f"{known}.") from None


@functools.lru_cache(maxsize=1)
def _exact_cdf():
    """P(D <= d) for the number D of discordant pairs of a random permutation of n <= 10 values.

    Counts of permutations by inversions (Mahonian numbers) from the standard recursion
    I(n, d) = sum_{j=0}^{min(d, n-1)} I(n-1, d-j); D = (N - S) / 2 with N = n(n-1)/2.
    """
    nmax = _nb.EXACT_MAX_N
    dmax = nmax * (nmax - 1) // 2
    cdf = np.ones((nmax + 1, dmax + 1))
    counts = np.zeros(dmax + 1, dtype=np.int64)
    counts[0] = 1  # n = 1
    for n in range(2, nmax + 1):
        new = np.zeros_like(counts)
        for d in range(n * (n - 1) // 2 + 1):
            lo = max(0, d - (n - 1))
            new[d] = counts[lo:d + 1].sum()
        counts = new
        cdf[n] = np.cumsum(counts) / counts.sum()
    cdf.setflags(write=False)
    return cdf


def _chunks(n_series):
    return _nb.chunks(n_series, numba.get_num_threads())


def _reshape(lead, *arrays):
    return tuple(a.reshape(lead) for a in arrays)


# ---------------------------------------------------------------------------------------------
# public kernels
# ---------------------------------------------------------------------------------------------
def mann_kendall(y, t=None, *, axis=-1, correction="none"):
    """Mann-Kendall test for a monotonic trend, per series.

    Parameters
    ----------
    y : (..., time) array_like
        Series, any leading shape; NaN = missing, dropped per series.
    t : (time,) array_like, optional
        Time of each step [decimal years]; irregular spacing allowed. Only the order matters: values
        are taken in time order. Pairs with equal ``t`` count zero in S and Var(S) uses Kendall's
        formula for ties in both time and values. Default: ``0 .. n-1``.
    axis : int, default -1
        Time axis of ``y``.
    correction : MannKendallCorrection or str, default "none"
        ``"none"``, ``"prewhiten"``, ``"trend-free-prewhiten"``, ``"hamed-rao"`` or
        ``"iterative-prewhiten"`` (see :func:`iterative_prewhiten`). The corrections treat the
        valid values, in time order, as consecutive equally spaced steps (gaps closed).

    Returns
    -------
    MannKendallResult
        ``s``, ``var_s``, ``z``, ``p_value``, ``tau`` (tau-a), ``n`` (valid values), each of the
        leading shape, float64 (``n`` int64).

    Notes
    -----
    S = sum_{i<j} sgn(x_j - x_i); Var(S) = [n(n-1)(2n+5) - sum_g u_g(u_g-1)(2u_g+5)] / 18 with
    u_g the size of tie group g; Z = (S - sgn S) / sqrt(Var S); p = 2 (1 - Phi(|Z|)).

    * Series of 10 or fewer values without ties (in values and in time) get the exact two-sided
      p-value from the permutation distribution of S instead of the normal approximation (all
      corrections but ``hamed-rao``, whose corrected variance has no exact counterpart). ``z`` is
      still the normal score.
    * Fewer than 3 valid values: every statistic NaN. All valid values equal: S = 0, Var = 0,
      Z = 0, p = 1, tau = 0 (no permutation can show a trend).
    * ``prewhiten`` and ``trend-free-prewhiten`` compute S on the n - 1 whitened values; ``tau``
      uses that length, ``n`` still counts the valid input values. A lag-1 autocorrelation of a
      constant (detrended) series is taken as 0. ``iterative-prewhiten`` does the same where it
      whitens (bias-corrected r >= 0.05) and otherwise runs the original test on the n values.
    * ``hamed-rao`` detrends with the Sen slope (against the step index), ranks, and sums only the
      rank autocorrelations outside +-1.96/sqrt(n) over all lags (as in Hamed & Rao 1998 and
      pymannkendall). If the correction factor is not positive the variance is undefined: z and p
      are NaN (about 1 % of short AR(1) series in the correction study).
    * Values that are equal in exact arithmetic can differ in the last bits after whitening or
      detrending (for example the pair of values that sets the Sen slope). Differences below
      1e-10 of the largest magnitude of the whitened / detrended series therefore count as ties;
      pymannkendall lets rounding decide, so the two can differ on such series (by one or two in
      S). Otherwise the results agree with pymannkendall's ``original_test``,
      ``pre_whitening_modification_test``, ``trend_free_pre_whitening_modification_test`` and
      ``hamed_rao_modification_test`` on the NaN-free series, except the exact small-n p-value.
      pymannkendall has no iterative pre-whitening; its parts are tested separately.

    References
    ----------
    Mann, H. B. (1945). Nonparametric tests against trend. Econometrica 13(3), 245-259.
    https://doi.org/10.2307/1907187
    Kendall, M. G. (1975). Rank Correlation Methods, 4th ed. Griffin, London.
    Gilbert, R. O. (1987). Statistical Methods for Environmental Pollution Monitoring. Wiley.
    von Storch, H. (1995). Misuses of statistical analysis in climate research. In: Analysis of
    Climate Variability, Springer, 11-26. https://doi.org/10.1007/978-3-662-03167-4_2
    Yue, S., Pilon, P., Phinney, B., Cavadias, G. (2002). The influence of autocorrelation on the
    ability to detect trend in hydrological series. Hydrological Processes 16(9), 1807-1829.
    https://doi.org/10.1002/hyp.1095
    Hamed, K. H., Rao, A. R. (1998). A modified Mann-Kendall trend test for autocorrelated data.
    Journal of Hydrology 204(1-4), 182-196. https://doi.org/10.1016/S0022-1694(97)00125-X
    Zhang, X., Vincent, L. A., Hogg, W. D., Niitsoo, A. (2000). Temperature and precipitation
    trends in Canada during the 20th century. Atmosphere-Ocean 38(3), 395-429.
    https://doi.org/10.1080/07055900.2000.9649654
    Wang, X. L., Swail, V. R. (2001). Changes of extreme wave heights in Northern Hemisphere oceans
    and related atmospheric circulation regimes. Journal of Climate 14(10), 2204-2221.
    https://doi.org/10.1175/1520-0442(2001)014<2204:COEWHI>2.0.CO;2

    Examples
    --------
    >>> import numpy as np
    >>> from unmix.trend import mann_kendall
    >>> y = np.array([12.9, 14.8, 13.2, 15.7, 13.8, 15.6, 12.9, 11.0, 17.3, 15.9, 19.0, 18.3,
    ...               20.1, 21.7])
    >>> r = mann_kendall(y)
    >>> float(r.s), round(float(r.var_s), 3), round(float(r.z), 4)
    (54.0, 332.667, 2.9058)
    """
    corr = _correction(correction)
    y2, lead = _series(y, axis)
    nt = y2.shape[1]
    order, ts = _times(t, nt)
    if order is not None:
        y2 = np.ascontiguousarray(y2[:, order])
    # dense codes of equal times; pairs within a code count zero
    tg = np.concatenate(([0], np.cumsum(ts[1:] != ts[:-1]))).astype(np.int64) if nt else \
        np.zeros(0, np.int64)
    use_tg = bool(nt > 1 and tg[-1] < nt - 1)
    ns = y2.shape[0]
    s, var, z, p, tau = (np.empty(ns) for _ in range(5))
    n = np.empty(ns, dtype=np.int64)
    if ns:
        _nb.mann_kendall_batch(y2, tg, use_tg, _CORRECTION_CODE[corr], _exact_cdf(),
                               _chunks(ns), s, var, z, p, tau, n)
    return MannKendallResult(*_reshape(lead, s, var, z, p, tau, n))


def iterative_prewhiten(y, *, axis=-1):
    """Iterative pre-whitening of each series, as used by ``correction="iterative-prewhiten"``.

    Parameters
    ----------
    y : (..., time) array_like
        Series in time order; NaN = missing, dropped per series (the valid values are taken as
        consecutive equally spaced steps).
    axis : int, default -1
        Time axis of ``y``.

    Returns
    -------
    PrewhitenResult
        ``series`` (the values the test runs on, compacted, NaN-padded), ``rho``, ``slope`` (per
        step), ``iterations``. NaN ``rho`` / ``slope`` for fewer than 3 valid values.

    Notes
    -----
    Plain lag-1 pre-whitening estimates the autocorrelation from the raw series, trend included,
    so a strong real trend looks like autocorrelation near 1 and is whitened away. The iterative
    procedure of Zhang et al. (2000), as set out by Wang & Swail (2001), estimates it from the
    series with the current trend removed:

    1. b = Sen slope of x against the step index t = 0 .. n-1 (the trend-free start of Yue et al.
       2002; Zhang et al. start from r of the raw series, which is the first step of the same
       fixed-point iteration);
    2. r = lag-1 autocorrelation (biased 1/n autocovariance) of d_t = x_t - b t, bias-corrected
       by inverting Kendall's (1954) approximation E[r] ~ rho - (1 + 4 rho) / n:
       rho = (n r + 1) / (n - 4) (the correction used by Zhang et al. 2000; formula from memory);
    3. if rho < 0.05 the series is treated as serially independent (Wang & Swail's rule, from
       memory): rho = 0 and b = Sen slope of x; else rho is capped at 0.99 (our choice, so that
       1 - rho stays positive) and w_t = (x_t - rho x_{t-1}) / (1 - rho), t = 1 .. n-1, which
       keeps the slope of a linear trend, and b = Sen slope of w;
    4. repeat 2-3 until rho and b each change by at most 1 % between rounds (absolute guards
       near zero: 1e-4 for rho; for b, a change over the record of 1e-4 residual standard
       deviations); at most 20 rounds, the last one used if not converged. The Sen median moves
       in discrete jumps, so much tighter tolerances end in two-round cycles instead.

    The Mann-Kendall test then runs on w (n - 1 values) where rho > 0, else on x. Series with
    fewer than 5 valid values are not whitened (the bias correction needs n > 4), nor is a series
    whose detrended values are constant.

    References
    ----------
    Zhang, X., Vincent, L. A., Hogg, W. D., Niitsoo, A. (2000). Temperature and precipitation
    trends in Canada during the 20th century. Atmosphere-Ocean 38(3), 395-429.
    https://doi.org/10.1080/07055900.2000.9649654
    Wang, X. L., Swail, V. R. (2001). Changes of extreme wave heights in Northern Hemisphere oceans
    and related atmospheric circulation regimes. Journal of Climate 14(10), 2204-2221.
    https://doi.org/10.1175/1520-0442(2001)014<2204:COEWHI>2.0.CO;2
    Kendall, M. G. (1954). Note on bias in the estimation of autocorrelation. Biometrika 41(3-4),
    403-404. https://doi.org/10.1093/biomet/41.3-4.403

    Examples
    --------
    >>> import numpy as np
    >>> from unmix.trend import iterative_prewhiten
    >>> rng = np.random.default_rng(0)
    >>> e = np.zeros(40)
    >>> for k in range(1, 40):
    ...     e[k] = 0.6 * e[k - 1] + rng.standard_normal()
    >>> r = iterative_prewhiten(0.5 * np.arange(40) + e)
    >>> bool(r.rho > 0), int(np.isfinite(r.series).sum())
    (True, 39)
    """
    y2, lead = _series(y, axis)
    ns, nt = y2.shape
    series = np.empty((ns, nt))
    rho, slope = np.empty(ns), np.empty(ns)
    it = np.empty(ns, dtype=np.int64)
    if ns:
        _nb.iterative_prewhiten_batch(y2, _chunks(ns), series, rho, slope, it)
    return PrewhitenResult(series.reshape(lead + (nt,)), *_reshape(lead, rho, slope, it))


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
    season = np.asarray(season)
    if season.ndim != 1 or season.shape[0] != nt:
        raise ShapeError(f"season must be 1-d with one label per time step ({nt}); got shape "
                         f"{season.shape}.")
    try:
        labels, codes = np.unique(season, return_inverse=True)
    except TypeError as err:
        raise InputError("season labels must be comparable (all numbers or all strings).") from err
    codes = np.ascontiguousarray(codes.reshape(-1), dtype=np.int64)
    ns = y2.shape[0]
    s, var, z, p, tau = (np.empty(ns) for _ in range(5))
    n = np.empty(ns, dtype=np.int64)
    if ns:
        _nb.seasonal_kendall_batch(y2, codes, len(labels), _chunks(ns), s, var, z, p, tau, n)
    return MannKendallResult(*_reshape(lead, s, var, z, p, tau, n))


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
    if not (isinstance(confidence, (int, float, np.floating)) and 0.5 < confidence < 1):
        raise InputError(f"confidence must be a confidence level between 0.5 and 1 (e.g. 0.95); "
                         f"got {confidence!r}. It is not the significance level.")
    dt = _out_float(y)
    y2, lead = _series(y, axis)
    nt = y2.shape[1]
    order, ts = _times(t, nt)
    if order is not None:
        y2 = np.ascontiguousarray(y2[:, order])
    zq = float(ndtri((1.0 - confidence) / 2.0))
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
    corrections use a sampled-band selection instead (``_trend_numba._median_band``).
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
        _nb.pettitt_batch(y2, _chunks(ns), k, idx, p)
    return PettittResult(*_reshape(lead, k, idx, p))


def fdr(p, q=0.05, *, method="bh"):
    """False-discovery-rate control over all p-values of an array (one family).

    Parameters
    ----------
    p : (...) array_like
        p-values in [0, 1], any shape (e.g. a map); NaN = no test, ignored.
    q : float, default 0.05
        False-discovery rate to control, in (0, 1).
    method : FdrMethod or str, default "bh"
        ``"bh"``: Benjamini & Hochberg (1995), for independent or positively dependent tests;
        ``"by"``: Benjamini & Yekutieli (2001), valid under any dependence (more conservative).

    Returns
    -------
    reject : (...) bool ndarray
        True where the null hypothesis is rejected (step-up: the k smallest p-values, k the largest
        i with p_(i) <= i q / (m c(m)), c(m) = 1 for bh, sum_{j<=m} 1/j for by). False at NaN.
    adjusted : (...) float64 ndarray
        Adjusted p-values (q-values), as ``scipy.stats.false_discovery_control``; NaN at NaN.

    References
    ----------
    Benjamini, Y., Hochberg, Y. (1995). Controlling the false discovery rate: a practical and
    powerful approach to multiple testing. J. R. Stat. Soc. B 57(1), 289-300.
    https://doi.org/10.1111/j.2517-6161.1995.tb02031.x
    Benjamini, Y., Yekutieli, D. (2001). The control of the false discovery rate in multiple
    testing under dependency. Annals of Statistics 29(4), 1165-1188.
    https://doi.org/10.1214/aos/1013699998

    Examples
    --------
    >>> from unmix.trend import fdr
    >>> reject, adj = fdr([0.001, 0.01, 0.03, 0.5], q=0.05)
    >>> reject.tolist()
    [True, True, True, False]
    """
    try:
        meth = FdrMethod(method)
    except ValueError:
        raise UnknownNameError(f"unknown FDR method {method!r}; use 'bh' or 'by'.") from None
    if not (isinstance(q, (int, float, np.floating)) and 0 < q < 1):
        raise InputError(f"q (false-discovery rate) must be between 0 and 1, e.g. 0.05; got {q!r}.")
    p = np.asarray(p, dtype=np.float64)
    flat = p.reshape(-1)
    valid = ~np.isnan(flat)
    pv = flat[valid]
    if pv.size and (pv.min() < 0 or pv.max() > 1):
        raise InputError("p-values must lie in [0, 1] (NaN for no test); got values outside.")
    reject = np.zeros(flat.shape, dtype=bool)
    adjusted = np.full(flat.shape, np.nan)
    m = pv.size
    if m:
        order = np.argsort(pv, kind="stable")
        ps = pv[order]
        i = np.arange(1, m + 1, dtype=np.float64)
        cm = np.sum(1.0 / i) if meth is FdrMethod.BY else 1.0
        # step-up rejection, on the definition rather than on rounded adjusted values
        below = np.flatnonzero(ps <= i * q / (m * cm))
        rej_sorted = np.zeros(m, dtype=bool)
        if below.size:
            rej_sorted[: below[-1] + 1] = True
        adj_sorted = np.minimum.accumulate((ps * (m * cm / i))[::-1])[::-1]
        adj_sorted = np.clip(adj_sorted, 0.0, 1.0)
        adj = np.empty(m)
        adj[order] = adj_sorted
        rej = np.empty(m, dtype=bool)
        rej[order] = rej_sorted
        adjusted[valid] = adj
        reject[valid] = rej
    return reject.reshape(p.shape), adjusted.reshape(p.shape)
