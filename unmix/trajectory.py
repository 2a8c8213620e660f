"""Trajectory labels for fraction time series, and modification rules across endmembers.

One fraction series (one endmember, one pixel, ``(..., time)``) gets one label from
:class:`Trajectory`: stable, a gradual or an abrupt increase or decrease, or too few dates to say.
Rules written by the analyst (see :func:`parse_rules`) then combine the labels of several endmembers
of the same pixel into named modification maps ("green vegetation decreasing while sand increases").

Decision rule of :func:`classify_trajectories`
----------------------------------------------
For each series, with ``n`` the number of valid (non-NaN) dates:

a. ``n < min_valid`` (default 8): ``insufficient_data``. These series are left out of the FDR
   families below (their q-values are NaN).
b. Monotonic trend: the Mann-Kendall test (or the seasonal Kendall test when ``season`` is given)
   gives a p-value per series; Benjamini-Hochberg q-values are computed over *all* series passed in
   one call (the whole map). A trend is significant where ``q_value <= q``.
c. Effect size: the Theil-Sen slope must reach ``|slope| >= min_slope`` [fraction/yr].
d. Shape: a least-squares **line** (2 parameters) and a least-squares **single step** (two means and
   one break, 3 parameters; the break is found by exhaustive search, each side keeping at least
   ``min_segment`` dates) are fitted to the valid dates and compared by the Bayesian information
   criterion ``BIC = n ln(RSS/n) + k ln(n)``. The step model is *preferred* where its BIC is lower.
e. Abrupt: the Pettitt p-values are made FDR-controlled the same way (``change_q <= q``), the step is
   preferred by BIC, and ``|step| >= min_step`` (default 0.05 fraction; step = mean after - mean
   before). An abrupt call does **not** require a significant Mann-Kendall trend: a level shift late
   in the series (a clearing in the last fifth of the record) dilutes Kendall's S with many
   stable pairs, while the step itself is large and clear. Both rank tests lose power for a break
   within about ``n/5`` dates of either end; such late changes are reported as ``stable`` or gradual
   until more dates arrive.
f. Label: abrupt (sign of the step) if (e) holds; else gradual (sign of the Sen slope) if (b) and
   (c) hold; else ``stable``.

``change_index`` (0-based position in the time axis of the first valid date after the break) and
``step`` are given for abrupt series only (-1 and NaN elsewhere); the break is the least-squares one
of (d), which locates a level shift more precisely than the Pettitt statistic.

The rank tests, Sen slope and BH procedure come from :mod:`unmix.trend`; the step and line fits are a
numba kernel here (:func:`fit_step_and_line`), parallel over series.

References
----------
Mann, H. B. (1945). Nonparametric tests against trend. Econometrica 13(3), 245-259.
https://doi.org/10.2307/1907187
Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's tau. JASA 63(324),
1379-1389. https://doi.org/10.1080/01621459.1968.10480934
Pettitt, A. N. (1979). A non-parametric approach to the change-point problem. Applied Statistics
28(2), 126-135. https://doi.org/10.2307/2346729
Hinkley, D. V. (1970). Inference about the change-point in a sequence of random variables.
Biometrika 57(1), 1-17. https://doi.org/10.1093/biomet/57.1.1
Schwarz, G. (1978). Estimating the dimension of a model. Annals of Statistics 6(2), 461-464.
https://doi.org/10.1214/aos/1176344136
Benjamini, Y., & Hochberg, Y. (1995). Controlling the false discovery rate. JRSS B 57(1), 289-300.
https://doi.org/10.1111/j.2517-6161.1995.tb02031.x
"""

from __future__ import annotations

import enum
import math
import re
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from numba import njit, prange

from .errors import InputError, LibraryFormatError, ShapeError, UnknownNameError
from .trend import DEFAULT_CORRECTION, fdr, mann_kendall, pettitt, seasonal_kendall, sen_slope

__all__ = [
    "Trajectory",
    "FLAG_VALUES",
    "FLAG_MEANINGS",
    "TrajectoryResult",
    "StepLineFit",
    "RankTests",
    "EffectSizes",
    "classify_trajectories",
    "rank_tests",
    "effect_sizes",
    "label_trajectories",
    "fit_step_and_line",
    "Rule",
    "parse_rules",
    "evaluate_rules",
    "check_rule_names",
    "pixel_area",
    "rule_area",
    "STATE_WORDS",
]


class Trajectory(enum.IntEnum):
    """Trajectory label of one fraction series; the integer codes are stable (stored in products).

    ``insufficient_data`` is the last code (5) so that the four change codes 1-4 sit between the
    ``stable`` code 0 and the no-data code.
    """

    STABLE = 0
    GRADUAL_INCREASE = 1
    GRADUAL_DECREASE = 2
    ABRUPT_INCREASE = 3
    ABRUPT_DECREASE = 4
    INSUFFICIENT_DATA = 5

    @property
    def label(self) -> str:
        """The lower-case label used in products and rules, e.g. ``gradual_decrease``."""
        return self.name.lower()


#: CF ``flag_values`` of the trajectory variable (int8).
FLAG_VALUES = np.array([m.value for m in Trajectory], dtype=np.int8)
#: CF ``flag_meanings``: the labels in code order, blank-separated.
FLAG_MEANINGS = " ".join(m.label for m in Trajectory)

_MIN_RSS_PER_DATE = 1e-12  # (1e-6 fraction)^2: floors the RSS so that exact fits stay finite in BIC


# --------------------------------------------------------------------------------------------------
# step and line fits (numba)
# --------------------------------------------------------------------------------------------------


class StepLineFit(NamedTuple):
    """Least-squares line and single-step fits of each series; arrays of the leading shape.

    Attributes
    ----------
    n_valid : (...) int32 ndarray
        Valid dates per series.
    line_slope, line_intercept : (...) float64 ndarray
        Least-squares line ``y = intercept + slope t`` [fraction/yr, fraction].
    line_rss : (...) float64 ndarray
        Residual sum of squares of the line [fraction^2].
    step_index : (...) int64 ndarray
        Position in the original time axis of the first valid date after the best break (-1: none).
    step_before, step_after : (...) float64 ndarray
        Means of the valid values before and after the break [fraction].
    step_rss : (...) float64 ndarray
        Residual sum of squares of the step model [fraction^2].
    """

    n_valid: np.ndarray
    line_slope: np.ndarray
    line_intercept: np.ndarray
    line_rss: np.ndarray
    step_index: np.ndarray
    step_before: np.ndarray
    step_after: np.ndarray
    step_rss: np.ndarray


@njit(cache=True, parallel=True)
def _step_line_kernel(y, t, min_segment, out_f, out_i):  # pragma: no cover - compiled
    m, n = y.shape
    for r in prange(m):
        vals = np.empty(n)
        tims = np.empty(n)
        pos = np.empty(n, dtype=np.int64)
        nv = 0
        for j in range(n):
            v = y[r, j]
            if not math.isnan(v):
                vals[nv] = v
                tims[nv] = t[j]
                pos[nv] = j
                nv += 1
        out_i[r, 0] = nv
        out_i[r, 1] = -1
        for k in range(6):
            out_f[r, k] = np.nan
        if nv < 2:
            continue
        ym = 0.0
        tm = 0.0
        for j in range(nv):
            ym += vals[j]
            tm += tims[j]
        ym /= nv
        tm /= nv
        sxx = 0.0
        sxy = 0.0
        syy = 0.0
        for j in range(nv):
            dt = tims[j] - tm
            dy = vals[j] - ym
            sxx += dt * dt
            sxy += dt * dy
            syy += dy * dy
        if sxx > 0.0:
            b = sxy / sxx
            out_f[r, 0] = b
            out_f[r, 1] = ym - b * tm
            rss = syy - b * sxy
            out_f[r, 2] = rss if rss > 0.0 else 0.0
        # best single step: minimise the within-segment sum of squares over all admissible breaks,
        # on values centred by the series mean (prefix sums of centred values stay well conditioned)
        if nv < 2 * min_segment:
            continue
        s_tot = 0.0
        for j in range(nv):
            s_tot += vals[j] - ym
        best = np.inf
        best_k = -1
        best_before = 0.0
        best_after = 0.0
        s_left = 0.0
        q_left = 0.0
        for j in range(min_segment - 1):
            d = vals[j] - ym
            s_left += d
            q_left += d * d
        for k in range(min_segment, nv - min_segment + 1):
            d = vals[k - 1] - ym
            s_left += d
            q_left += d * d
            n_l = k
            n_r = nv - k
            s_right = s_tot - s_left
            q_right = syy - q_left
            ss = (q_left - s_left * s_left / n_l) + (q_right - s_right * s_right / n_r)
            if ss < best:
                best = ss
                best_k = k
                best_before = s_left / n_l + ym
                best_after = s_right / n_r + ym
        if best_k > 0:
            out_i[r, 1] = pos[best_k]
            out_f[r, 3] = best_before
            out_f[r, 4] = best_after
            out_f[r, 5] = best if best > 0.0 else 0.0


def _as_series(y, t, name: str = "y") -> tuple[np.ndarray, np.ndarray]:
    y = np.asarray(y)
    if y.ndim < 1 or y.shape[-1] < 1:
        raise ShapeError(f"{name} must have a time axis last, shape (..., time); got shape {y.shape}")
    if not np.issubdtype(y.dtype, np.floating):
        y = y.astype(np.float64)
    t = np.asarray(t, dtype=np.float64)
    if t.ndim != 1 or t.shape[0] != y.shape[-1]:
        raise ShapeError(
            f"t must be one decimal year per date, shape ({y.shape[-1]},) to match {name} of shape {y.shape}; "
            f"got shape {t.shape}"
        )
    if not np.all(np.isfinite(t)):
        raise InputError("t (decimal years) holds NaN or infinite values; give a real date for every time step")
    if t.shape[0] > 1 and np.any(np.diff(t) <= 0):
        raise InputError("t (decimal years) must be strictly increasing; sort the dates and drop duplicates")
    return y, t


def fit_step_and_line(y, t, *, min_segment: int = 3) -> StepLineFit:
    """Least-squares line and best single step (change in mean) of each series.

    NaN values are dropped per series. The step model has two means and one break; the break is
    the one minimising the residual sum of squares over all positions leaving at least
    ``min_segment`` valid dates on each side (exhaustive search with prefix sums, O(n) per series).

    Parameters
    ----------
    y : (..., time) float ndarray
        Fraction series, NaN = no data.
    t : (time,) float ndarray
        Dates in decimal years [yr], strictly increasing.
    min_segment : int
        Minimum valid dates on each side of a break (default 3).

    Returns
    -------
    StepLineFit
        Arrays of the leading shape ``y.shape[:-1]``; float64 statistics.

    References
    ----------
    Hinkley, D. V. (1970). Inference about the change-point in a sequence of random variables.
    Biometrika 57(1), 1-17. https://doi.org/10.1093/biomet/57.1.1

    Examples
    --------
    >>> import numpy as np
    >>> y = np.r_[np.full(5, 0.5), np.full(5, 0.3)]
    >>> fit = fit_step_and_line(y, np.arange(10.0))
    >>> int(fit.step_index), round(float(fit.step_after - fit.step_before), 3)
    (5, -0.2)
    """
    y, t = _as_series(y, t)
    if int(min_segment) < 1:
        raise InputError(f"min_segment must be at least 1, got {min_segment}")
    lead = y.shape[:-1]
    y2 = np.ascontiguousarray(y.reshape(-1, y.shape[-1]), dtype=np.float64)
    out_f = np.empty((y2.shape[0], 6), dtype=np.float64)
    out_i = np.empty((y2.shape[0], 2), dtype=np.int64)
    if y2.shape[0]:
        _step_line_kernel(y2, t, int(min_segment), out_f, out_i)
    f = [out_f[:, k].reshape(lead) for k in range(6)]
    return StepLineFit(
        n_valid=out_i[:, 0].astype(np.int32).reshape(lead),
        line_slope=f[0],
        line_intercept=f[1],
        line_rss=f[2],
        step_index=out_i[:, 1].reshape(lead),
        step_before=f[3],
        step_after=f[4],
        step_rss=f[5],
    )


def _step_preferred(fit: StepLineFit) -> np.ndarray:
    """True where the step model has the lower BIC (k = 3 against k = 2 for the line)."""
    n = fit.n_valid.astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        floor = _MIN_RSS_PER_DATE * n
        bic_line = n * np.log(np.maximum(fit.line_rss, floor) / n) + 2.0 * np.log(n)
        bic_step = n * np.log(np.maximum(fit.step_rss, floor) / n) + 3.0 * np.log(n)
        return np.asarray(bic_step < bic_line) & np.isfinite(fit.step_rss)


# --------------------------------------------------------------------------------------------------
# the three stages: per-series rank tests, per-series effect sizes, labels after map-wide FDR
# --------------------------------------------------------------------------------------------------


class RankTests(NamedTuple):
    """Per-series rank tests: Mann-Kendall (or seasonal Kendall) and Pettitt; leading shape."""

    p_value: np.ndarray
    tau: np.ndarray
    change_p: np.ndarray
    n_valid: np.ndarray


class EffectSizes(NamedTuple):
    """Per-series Theil-Sen slope with its confidence interval, and the step/line fits."""

    slope: np.ndarray
    slope_low: np.ndarray
    slope_high: np.ndarray
    intercept: np.ndarray
    fit: StepLineFit


class TrajectoryResult(NamedTuple):
    """Result of :func:`classify_trajectories`; every field has the leading shape of ``y``.

    Attributes
    ----------
    trajectory : int8 ndarray
        :class:`Trajectory` codes.
    slope, slope_low, slope_high : float ndarray
        Theil-Sen slope and its confidence bounds [fraction/yr].
    intercept : float ndarray
        Sen intercept, ``median(y) - slope * median(t)`` [fraction].
    tau : float ndarray
        Kendall's tau.
    p_value : float ndarray
        Mann-Kendall (or seasonal Kendall) two-sided p-value.
    q_value : float ndarray
        BH-adjusted p-value over all series with enough dates (NaN for the others).
    change_index : int64 ndarray
        First date after the break (0-based time index) for abrupt series, -1 elsewhere.
    change_p : float ndarray
        Pettitt p-value.
    change_q : float ndarray
        BH-adjusted Pettitt p-value (NaN for series with too few dates).
    step : float ndarray
        Mean after minus mean before the break [fraction] for abrupt series, NaN elsewhere.
    n_valid : int32 ndarray
        Valid dates per series.
    """

    trajectory: np.ndarray
    slope: np.ndarray
    slope_low: np.ndarray
    slope_high: np.ndarray
    intercept: np.ndarray
    tau: np.ndarray
    p_value: np.ndarray
    q_value: np.ndarray
    change_index: np.ndarray
    change_p: np.ndarray
    change_q: np.ndarray
    step: np.ndarray
    n_valid: np.ndarray


def rank_tests(y, t, *, correction=DEFAULT_CORRECTION, season=None) -> RankTests:
    """Mann-Kendall (or seasonal Kendall) and Pettitt tests of each series; no cross-series step.

    Parameters
    ----------
    y : (..., time) float ndarray
        Fraction series, NaN = no data.
    t : (time,) float ndarray
        Decimal years [yr].
    correction : MannKendallCorrection or str
        Serial-correlation correction of the Mann-Kendall variance (ignored with ``season``).
    season : (time,) int ndarray, optional
        Season label of each date; the seasonal Kendall test is used instead of Mann-Kendall.

    Returns
    -------
    RankTests
        ``p_value``, ``tau``, ``change_p`` in the float dtype of ``y``; ``n_valid`` int32.

    References
    ----------
    Hirsch, R. M., Slack, J. R., & Smith, R. A. (1982). Techniques of trend analysis for monthly
    water quality data. Water Resources Research 18(1), 107-121.
    https://doi.org/10.1029/WR018i001p00107

    Examples
    --------
    >>> import numpy as np
    >>> r = rank_tests(np.linspace(0.6, 0.2, 20), np.arange(20.0))
    >>> bool(r.p_value < 0.01), float(r.tau)
    (True, -1.0)
    """
    y, t = _as_series(y, t)
    dtype = y.dtype
    if season is not None:
        season = np.asarray(season)
        if season.shape != t.shape:
            raise ShapeError(f"season must hold one label per date, shape {t.shape}; got {season.shape}")
        mk = seasonal_kendall(y, season, axis=-1)
    else:
        mk = mann_kendall(y, t, axis=-1, correction=correction)
    pt = pettitt(y, axis=-1)
    n_valid = np.sum(~np.isnan(y), axis=-1).astype(np.int32)
    return RankTests(
        p_value=np.asarray(mk.p_value, dtype=dtype),
        tau=np.asarray(mk.tau, dtype=dtype),
        change_p=np.asarray(pt.p_value, dtype=dtype),
        n_valid=n_valid,
    )


def effect_sizes(y, t, *, confidence: float = 0.95, min_segment: int = 3) -> EffectSizes:
    """Theil-Sen slope (with confidence interval) and the least-squares step/line fits of each series.

    Parameters
    ----------
    y : (..., time) float ndarray
        Fraction series, NaN = no data.
    t : (time,) float ndarray
        Decimal years [yr].
    confidence : float
        Confidence level of the slope interval (default 0.95).
    min_segment : int
        Minimum valid dates on each side of a break.

    Returns
    -------
    EffectSizes

    References
    ----------
    Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's tau. JASA 63(324),
    1379-1389. https://doi.org/10.1080/01621459.1968.10480934

    Examples
    --------
    >>> import numpy as np
    >>> e = effect_sizes(np.linspace(0.6, 0.2, 20), np.arange(20.0))
    >>> round(float(e.slope), 4)
    -0.0211
    """
    y, t = _as_series(y, t)
    dtype = y.dtype
    ss = sen_slope(y, t, axis=-1, confidence=confidence)
    return EffectSizes(
        slope=np.asarray(ss.slope, dtype=dtype),
        slope_low=np.asarray(ss.low, dtype=dtype),
        slope_high=np.asarray(ss.high, dtype=dtype),
        intercept=np.asarray(ss.intercept, dtype=dtype),
        fit=fit_step_and_line(y, t, min_segment=min_segment),
    )


def _check_thresholds(q, min_slope, min_valid, min_step) -> None:
    if not 0.0 < float(q) < 1.0:
        raise InputError(f"q (the false discovery rate) must lie between 0 and 1, got {q}; 0.05 is usual")
    if float(min_slope) < 0.0:
        raise InputError(f"min_slope must be >= 0 [fraction/yr], got {min_slope}")
    if int(min_valid) < 3:
        raise InputError(f"min_valid must be at least 3 dates, got {min_valid}")
    if float(min_step) < 0.0:
        raise InputError(f"min_step must be >= 0 [fraction], got {min_step}")


def label_trajectories(
    tests: RankTests,
    effects: EffectSizes,
    q_value,
    change_q,
    *,
    q: float = 0.05,
    min_slope: float = 0.005,
    min_valid: int = 8,
    min_step: float = 0.05,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Apply the decision rule (module docstring, steps a-f) element by element.

    Parameters
    ----------
    tests : RankTests
    effects : EffectSizes
    q_value, change_q : (...) float ndarray
        BH-adjusted Mann-Kendall and Pettitt p-values (computed over the whole map by the caller).
    q, min_slope, min_valid, min_step
        See :func:`classify_trajectories`.

    Returns
    -------
    trajectory : (...) int8 ndarray
    change_index : (...) int64 ndarray
        -1 where the series is not abrupt.
    step : (...) float ndarray
        NaN where the series is not abrupt.

    Examples
    --------
    See :func:`classify_trajectories`.
    """
    _check_thresholds(q, min_slope, min_valid, min_step)
    fit = effects.fit
    valid = np.asarray(tests.n_valid) >= int(min_valid)
    slope = np.asarray(effects.slope)
    step = fit.step_after - fit.step_before
    with np.errstate(invalid="ignore"):
        gradual = valid & (np.asarray(q_value) <= q) & (np.abs(slope) >= min_slope)
        abrupt = (
            valid
            & (np.asarray(change_q) <= q)
            & (np.abs(step) >= min_step)
            & _step_preferred(fit)
            & (fit.step_index >= 0)
        )
        label = np.full(valid.shape, Trajectory.STABLE, dtype=np.int8)
        label[gradual & (slope > 0)] = Trajectory.GRADUAL_INCREASE
        label[gradual & (slope < 0)] = Trajectory.GRADUAL_DECREASE
        label[abrupt & (step > 0)] = Trajectory.ABRUPT_INCREASE
        label[abrupt & (step < 0)] = Trajectory.ABRUPT_DECREASE
    label[~valid] = Trajectory.INSUFFICIENT_DATA
    change_index = np.where(abrupt, fit.step_index, -1).astype(np.int64)
    step_out = np.where(abrupt, step, np.nan).astype(slope.dtype if slope.dtype.kind == "f" else np.float64)
    return label, change_index, step_out


def _fdr_family(p, n_valid, min_valid: int, q: float) -> np.ndarray:
    """BH q-values over the series with enough dates (others NaN), any leading shape."""
    p = np.asarray(p)
    fam = np.where(np.asarray(n_valid) >= int(min_valid), p, np.nan)
    if fam.size == 0:
        return fam
    _, adjusted = fdr(fam.reshape(-1), q=q)
    return np.asarray(adjusted, dtype=p.dtype).reshape(p.shape)


def classify_trajectories(
    y,
    t,
    *,
    q: float = 0.05,
    min_slope: float = 0.005,
    min_valid: int = 8,
    min_step: float = 0.05,
    correction=DEFAULT_CORRECTION,
    season=None,
    confidence: float = 0.95,
    min_segment: int = 3,
) -> TrajectoryResult:
    """Label each fraction series stable, gradual/abrupt increase/decrease, or insufficient data.

    The decision rule is given in the module docstring (steps a-f). The false discovery rate is
    controlled over **all** series passed in (pass the whole map of one endmember at once; the cube
    layer, :func:`unmix.cube.trends.trend_cube`, does the same for maps larger than memory).

    Parameters
    ----------
    y : (..., time) float ndarray
        Fractions of one endmember [0..1], NaN = no data.
    t : (time,) float ndarray
        Decimal years [yr], strictly increasing (irregular spacing is fine).
    q : float
        False discovery rate of the Benjamini-Hochberg procedure (default 0.05).
    min_slope : float
        Smallest |Sen slope| called a gradual change [fraction/yr] (default 0.005).
    min_valid : int
        Fewest valid dates for a label (default 8).
    min_step : float
        Smallest |step| called an abrupt change [fraction] (default 0.05).
    correction : MannKendallCorrection or str
        Serial-correlation correction of the Mann-Kendall test (default ``unmix.trend.DEFAULT_CORRECTION``).
    season : (time,) int ndarray, optional
        Season labels; the seasonal Kendall test replaces Mann-Kendall.
    confidence : float
        Confidence level of the Sen slope interval.
    min_segment : int
        Fewest valid dates on each side of a step.

    Returns
    -------
    TrajectoryResult

    References
    ----------
    See the module docstring (Mann 1945; Sen 1968; Pettitt 1979; Hinkley 1970; Schwarz 1978;
    Benjamini & Hochberg 1995).

    Examples
    --------
    >>> import numpy as np
    >>> t = 2015 + np.arange(40) / 4
    >>> rng = np.random.default_rng(0)
    >>> y = np.stack([0.6 - 0.03 * (t - 2015), np.where(t < 2020, 0.6, 0.4), np.full(40, 0.5)])
    >>> y = y + rng.normal(0, 0.01, y.shape)
    >>> r = classify_trajectories(y, t)
    >>> [Trajectory(c).label for c in r.trajectory]
    ['gradual_decrease', 'abrupt_decrease', 'stable']
    >>> int(r.change_index[1])
    20
    """
    _check_thresholds(q, min_slope, min_valid, min_step)
    tests = rank_tests(y, t, correction=correction, season=season)
    effects = effect_sizes(y, t, confidence=confidence, min_segment=min_segment)
    q_value = _fdr_family(tests.p_value, tests.n_valid, min_valid, q)
    change_q = _fdr_family(tests.change_p, tests.n_valid, min_valid, q)
    label, change_index, step = label_trajectories(
        tests, effects, q_value, change_q, q=q, min_slope=min_slope, min_valid=min_valid, min_step=min_step
    )
    return TrajectoryResult(
        trajectory=label,
        slope=effects.slope,
        slope_low=effects.slope_low,
        slope_high=effects.slope_high,
        intercept=effects.intercept,
        tau=tests.tau,
        p_value=tests.p_value,
        q_value=q_value,
        change_index=change_index,
        change_p=tests.change_p,
        change_q=change_q,
        step=step,
        n_valid=tests.n_valid,
    )


# --------------------------------------------------------------------------------------------------
# modification rules across endmembers
# --------------------------------------------------------------------------------------------------

#: Words a rule may use after ``endmember:`` and the trajectory codes each one matches.
STATE_WORDS: dict[str, tuple[Trajectory, ...]] = {
    **{m.label: (m,) for m in Trajectory if m is not Trajectory.INSUFFICIENT_DATA},
    "increase": (Trajectory.GRADUAL_INCREASE, Trajectory.ABRUPT_INCREASE),
    "decrease": (Trajectory.GRADUAL_DECREASE, Trajectory.ABRUPT_DECREASE),
    "gradual": (Trajectory.GRADUAL_INCREASE, Trajectory.GRADUAL_DECREASE),
    "abrupt": (Trajectory.ABRUPT_INCREASE, Trajectory.ABRUPT_DECREASE),
    "change": (
        Trajectory.GRADUAL_INCREASE,
        Trajectory.GRADUAL_DECREASE,
        Trajectory.ABRUPT_INCREASE,
        Trajectory.ABRUPT_DECREASE,
    ),
}


@dataclass(frozen=True)
class _Term:
    endmember: str
    state: str
    column: int


@dataclass(frozen=True)
class _Not:
    operand: object


@dataclass(frozen=True)
class _And:
    left: object
    right: object


@dataclass(frozen=True)
class _Or:
    left: object
    right: object


@dataclass(frozen=True)
class Rule:
    """One parsed modification rule.

    Attributes
    ----------
    name : str
        Rule name (becomes a product variable name).
    text : str
        The expression as written.
    tree : object
        Abstract syntax tree of ``_Term``, ``_Not``, ``_And``, ``_Or`` nodes.
    source : str
        Where the rule came from (file name, or ``<string>``).
    line : int
        1-based line number in the source.
    """

    name: str
    text: str
    tree: object
    source: str = "<string>"
    line: int = 0

    @property
    def endmembers(self) -> tuple[str, ...]:
        """Endmember names the rule refers to, in order of first appearance."""
        seen: list[str] = []

        def walk(node):
            if isinstance(node, _Term):
                if node.endmember not in seen:
                    seen.append(node.endmember)
            elif isinstance(node, _Not):
                walk(node.operand)
            else:
                walk(node.left)
                walk(node.right)

        walk(self.tree)
        return tuple(seen)


_TOKEN = re.compile(r"\s*(?:(?P<name>[A-Za-z_][A-Za-z0-9_.\-]*)|(?P<op>[&|!():]))")
_RULE_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")


class _Parser:
    """Recursive-descent parser: ``or := and ('|' and)*``, ``and := not ('&' not)*``,
    ``not := '!' not | atom``, ``atom := '(' or ')' | NAME ':' NAME``."""

    def __init__(self, text: str, offset: int, source: str, line: int):
        self.text, self.offset, self.source, self.line = text, offset, source, line
        self.tokens: list[tuple[str, str, int]] = []
        pos = 0
        while pos < len(text):
            if text[pos:].strip() == "":
                break
            m = _TOKEN.match(text, pos)
            if not m:
                col = pos + len(text[pos:]) - len(text[pos:].lstrip())
                self.fail(col, f"unexpected character {text[col]!r}")
            kind = "name" if m.group("name") else "op"
            self.tokens.append((kind, m.group(kind), m.start(kind)))
            pos = m.end()
        self.i = 0

    def fail(self, col: int, what: str):
        raise LibraryFormatError(
            f"{self.source}, line {self.line}, column {self.offset + col + 1}: {what}. Rules read "
            "'name = endmember:state & (endmember:state | !endmember:state)'; states are "
            + ", ".join(STATE_WORDS)
        )

    def peek(self):
        return self.tokens[self.i] if self.i < len(self.tokens) else ("end", "", len(self.text))

    def take(self, value: str | None = None, kind: str | None = None):
        tok = self.peek()
        if (value is not None and tok[1] != value) or (kind is not None and tok[0] != kind) or tok[0] == "end":
            want = repr(value) if value else ("a name" if kind == "name" else "more")
            found = "end of line" if tok[0] == "end" else repr(tok[1])
            self.fail(tok[2], f"expected {want}, found {found}")
        self.i += 1
        return tok

    def parse(self):
        if not self.tokens:
            self.fail(0, "empty rule expression")
        node = self.parse_or()
        if self.i < len(self.tokens):
            tok = self.peek()
            self.fail(tok[2], f"unexpected {tok[1]!r} (missing '&' or '|'?)")
        return node

    def parse_or(self):
        node = self.parse_and()
        while self.peek()[1] == "|":
            self.i += 1
            node = _Or(node, self.parse_and())
        return node

    def parse_and(self):
        node = self.parse_not()
        while self.peek()[1] == "&":
            self.i += 1
            node = _And(node, self.parse_not())
        return node

    def parse_not(self):
        if self.peek()[1] == "!":
            self.i += 1
            return _Not(self.parse_not())
        return self.parse_atom()

    def parse_atom(self):
        tok = self.peek()
        if tok[1] == "(":
            self.i += 1
            node = self.parse_or()
            self.take(")")
            return node
        if tok[0] != "name":
            self.fail(tok[2], f"expected an endmember name or '(', found {'end of line' if tok[0] == 'end' else repr(tok[1])}")
        self.i += 1
        self.take(":")
        state_tok = self.take(kind="name")
        if state_tok[1] not in STATE_WORDS:
            self.fail(state_tok[2], f"unknown state {state_tok[1]!r}")
        return _Term(tok[1], state_tok[1], self.offset + tok[2] + 1)


def parse_rules(text: str, *, source: str = "<string>") -> list[Rule]:
    """Parse modification rules, one per line.

    Format (our own, plain text, UTF-8)::

        # comments start with '#'; blank lines are ignored
        desertification = green_vegetation:gradual_decrease & sand:gradual_increase
        canopy_thinning = green_vegetation:decrease & (shade:increase | dry_vegetation:increase)

    A rule is ``NAME = EXPRESSION``. ``NAME`` is a letter or underscore then letters, digits,
    underscores. The expression combines terms ``endmember:state`` with ``!`` (not, binds tightest),
    ``&`` (and) and ``|`` (or, loosest) and parentheses. A state is one of the trajectory labels
    (``stable``, ``gradual_increase``, ``gradual_decrease``, ``abrupt_increase``,
    ``abrupt_decrease``) or a group: ``increase`` (gradual or abrupt), ``decrease``, ``gradual``
    (either direction), ``abrupt``, ``change`` (any of the four changes).

    Parameters
    ----------
    text : str
        The rules.
    source : str
        Name used in error messages (the file name).

    Returns
    -------
    list of Rule

    Raises
    ------
    LibraryFormatError
        Naming the source, line and column.

    Examples
    --------
    >>> rules = parse_rules("thinning = gv:decrease & !soil:stable")
    >>> rules[0].name, rules[0].endmembers
    ('thinning', ('gv', 'soil'))
    """
    rules: list[Rule] = []
    names: set[str] = set()
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0]
        if not line.strip():
            continue
        if "=" not in line:
            col = len(line) - len(line.lstrip())
            raise LibraryFormatError(
                f"{source}, line {lineno}, column {col + 1}: expected 'name = expression' (no '=' found)"
            )
        head, expr = line.split("=", 1)
        name = head.strip()
        if not _RULE_NAME.match(name):
            col = len(head) - len(head.lstrip())
            raise LibraryFormatError(
                f"{source}, line {lineno}, column {col + 1}: rule name {name!r} must start with a letter or "
                "underscore and hold only letters, digits and underscores"
            )
        if name in names:
            raise LibraryFormatError(f"{source}, line {lineno}, column 1: rule {name!r} is defined twice; rename one")
        offset = len(head) + 1
        tree = _Parser(expr, offset, source, lineno).parse()
        rules.append(Rule(name=name, text=expr.strip(), tree=tree, source=source, line=lineno))
        names.add(name)
    return rules


def check_rule_names(rules: list[Rule], endmembers) -> None:
    """Raise :class:`UnknownNameError` if a rule names an endmember not in ``endmembers`` (listed)."""
    available = list(endmembers)
    for rule in rules:
        for em in rule.endmembers:
            if em not in available:
                raise UnknownNameError(
                    f"{rule.source}, line {rule.line}: rule {rule.name!r} names endmember {em!r}, which the "
                    f"product does not hold; available: {', '.join(available)}"
                )


def evaluate_rules(rules: list[Rule], trajectory, endmembers) -> dict[str, np.ndarray]:
    """Evaluate rules on trajectory codes; one uint8 map per rule (1 true, 0 false, 255 no data).

    A pixel is no data for a rule where any endmember the rule names has ``insufficient_data``.

    Parameters
    ----------
    rules : list of Rule
    trajectory : (..., endmember) int ndarray
        :class:`Trajectory` codes, endmember axis last.
    endmembers : sequence of str
        Names along the last axis.

    Returns
    -------
    dict of str to (...) uint8 ndarray

    Raises
    ------
    UnknownNameError
        A rule names an endmember that is not in ``endmembers`` (the message lists them).

    Examples
    --------
    >>> import numpy as np
    >>> codes = np.array([[2, 1], [0, 1]], dtype=np.int8)  # (pixel, endmember)
    >>> rules = parse_rules("d = gv:gradual_decrease & sand:increase")
    >>> evaluate_rules(rules, codes, ["gv", "sand"])["d"]
    array([1, 0], dtype=uint8)
    """
    trajectory = np.asarray(trajectory)
    endmembers = list(endmembers)
    if trajectory.ndim < 1 or trajectory.shape[-1] != len(endmembers):
        raise ShapeError(
            f"trajectory must have the endmember axis last with {len(endmembers)} entries "
            f"({', '.join(endmembers)}); got shape {trajectory.shape}"
        )
    check_rule_names(rules, endmembers)
    index = {name: i for i, name in enumerate(endmembers)}

    def ev(node):
        if isinstance(node, _Term):
            codes = np.array([int(c) for c in STATE_WORDS[node.state]], dtype=trajectory.dtype)
            return np.isin(trajectory[..., index[node.endmember]], codes)
        if isinstance(node, _Not):
            return ~ev(node.operand)
        if isinstance(node, _And):
            return ev(node.left) & ev(node.right)
        return ev(node.left) | ev(node.right)

    out: dict[str, np.ndarray] = {}
    for rule in rules:
        result = ev(rule.tree).astype(np.uint8)
        missing = np.zeros(trajectory.shape[:-1], dtype=bool)
        for em in rule.endmembers:
            missing |= trajectory[..., index[em]] == Trajectory.INSUFFICIENT_DATA
        result[missing] = 255
        out[rule.name] = result
    return out


def pixel_area(transform) -> float:
    """Area of one pixel [map units^2, m^2 for projected CRSs] from an affine transform.

    Parameters
    ----------
    transform : sequence of 6 floats
        ``(a, b, c, d, e, f)`` as in ``affine.Affine`` / rasterio (x = a col + b row + c, y = d col + e row + f).

    Returns
    -------
    float
        ``|a e - b d|``.

    Examples
    --------
    >>> pixel_area((30.0, 0.0, 500000.0, 0.0, -30.0, 4000000.0))
    900.0
    """
    a, b, _, d, e, _ = (float(v) for v in tuple(transform)[:6])
    return abs(a * e - b * d)


def rule_area(mask, pixel_area_m2: float) -> tuple[int, float, float]:
    """Pixel count, area [ha] and share of the valid pixels where a rule map is true.

    Parameters
    ----------
    mask : (...) uint8 ndarray
        Rule map from :func:`evaluate_rules` (1 true, 0 false, 255 no data) or a boolean map.
    pixel_area_m2 : float
        Area of one pixel [m^2].

    Returns
    -------
    count : int
    area_ha : float
        ``count * pixel_area_m2 / 10000`` [ha].
    share : float
        ``count / valid pixels`` [0..1] (NaN when no pixel is valid).

    Examples
    --------
    >>> import numpy as np
    >>> rule_area(np.array([1, 1, 0, 255], dtype=np.uint8), 900.0)
    (2, 0.18, 0.6666666666666666)
    """
    mask = np.asarray(mask)
    count = int(np.count_nonzero(mask == 1))
    valid = int(np.count_nonzero(mask <= 1)) if mask.dtype != bool else mask.size
    share = count / valid if valid else float("nan")
    return count, count * float(pixel_area_m2) / 10000.0, share
