"""Trajectory labels for fraction time series.

One fraction series (one endmember, one pixel, ``(..., time)``) gets one label from
:class:`Trajectory`: stable, a gradual or an abrupt increase or decrease, or too few dates to say.

Decision rule of :func:`classify_trajectories`
----------------------------------------------
For each series, with ``n`` the number of valid (non-NaN) dates:

a. ``n < min_valid`` (default 8): ``insufficient_data``. These series are left out of the FDR
   families below (their q-values are NaN).
b. Monotonic trend: the Mann-Kendall test (or the seasonal Kendall test when ``season`` is given)
   gives a p-value per series; Benjamini-Hochberg q-values are computed over *all* series passed in
   one call (the whole map). A trend is significant where ``q_value <= q``.
c. Effect size: the Theil-Sen slope (the seasonal Sen slope of Hirsch et al. 1982, within-season
   pairs only, when ``season`` is given) must reach ``|slope| >= min_slope`` [fraction/yr].
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

The rank tests, Sen slope and BH procedure come from :mod:`unmix.trend` (through
:mod:`unmix.trajectory.per_series`); the step and line fits are a numba kernel in
:mod:`unmix.trajectory.step_fit`, parallel over series.

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
Hirsch, R. M., Slack, J. R., & Smith, R. A. (1982). Techniques of trend analysis for monthly
water quality data. Water Resources Research 18(1), 107-121. https://doi.org/10.1029/WR018i001p00107
Schwarz, G. (1978). Estimating the dimension of a model. Annals of Statistics 6(2), 461-464.
https://doi.org/10.1214/aos/1176344136
Benjamini, Y., & Hochberg, Y. (1995). Controlling the false discovery rate. JRSS B 57(1), 289-300.
https://doi.org/10.1111/j.2517-6161.1995.tb02031.x
"""

from __future__ import annotations

import enum
from typing import NamedTuple

import numpy as np

from ..errors import InputError
from ..trend import DEFAULT_CORRECTION, fdr
from .per_series import EffectSizes, RankTests, effect_sizes, rank_tests
from .step_fit import _step_preferred

__all__ = [
    "Trajectory",
    "FLAG_VALUES",
    "FLAG_MEANINGS",
    "TrajectoryResult",
    "classify_trajectories",
    "label_trajectories",
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


class TrajectoryResult(NamedTuple):
    """Result of :func:`classify_trajectories`; every field has the leading shape of ``y``.

    Attributes
    ----------
    trajectory : int8 ndarray
        :class:`Trajectory` codes.
    slope, slope_low, slope_high : float ndarray
        Theil-Sen (or seasonal Sen) slope and its confidence bounds [fraction/yr].
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
        Season labels; the seasonal Kendall test replaces Mann-Kendall and the seasonal Sen slope
        replaces the Theil-Sen slope.
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
    effects = effect_sizes(y, t, confidence=confidence, min_segment=min_segment, season=season)
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
