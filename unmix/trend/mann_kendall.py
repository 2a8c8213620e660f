"""Mann-Kendall test for a monotonic trend, with corrections for serial correlation.

:func:`mann_kendall` (the test; corrections ``prewhiten``, ``trend-free-prewhiten``, ``hamed-rao``,
``iterative-prewhiten``) and :func:`iterative_prewhiten` (the series, autocorrelation and slope
behind the last one). Compiled kernels: :mod:`._mann_kendall_numba`, :mod:`._prewhiten_numba`.
"""

from __future__ import annotations

import enum
import functools
from dataclasses import dataclass

import numpy as np

from unmix.errors import UnknownNameError

from . import _mann_kendall_numba as _nb
from ._arguments import _check_pairwise_length, _chunks, _reshape, _series, _times
from ._prewhiten_numba import iterative_prewhiten_batch

__all__ = [
    "MannKendallCorrection",
    "DEFAULT_CORRECTION",
    "MannKendallResult",
    "PrewhitenResult",
    "mann_kendall",
    "iterative_prewhiten",
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


#: corrections that detrend with the Sen slope and so hold every pairwise slope of a series
_NEEDS_PAIRWISE = frozenset({MannKendallCorrection.TREND_FREE_PREWHITEN, MannKendallCorrection.HAMED_RAO,
                             MannKendallCorrection.ITERATIVE_PREWHITEN})


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
    if corr in _NEEDS_PAIRWISE:
        _check_pairwise_length(nt, f"the Mann-Kendall correction {corr.value!r}")
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
    _check_pairwise_length(nt, "iterative pre-whitening")
    series = np.empty((ns, nt))
    rho, slope = np.empty(ns), np.empty(ns)
    it = np.empty(ns, dtype=np.int64)
    if ns:
        iterative_prewhiten_batch(y2, _chunks(ns), series, rho, slope, it)
    return PrewhitenResult(series.reshape(lead + (nt,)), *_reshape(lead, rho, slope, it))
