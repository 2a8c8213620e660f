"""The per-series stages of the trajectory labels: rank tests and effect sizes.

:func:`rank_tests` (Mann-Kendall or seasonal Kendall, and Pettitt p-values) and
:func:`effect_sizes` (Theil-Sen or seasonal Sen slope with its interval, step and line fits) work
series by series; the map-wide false-discovery-rate step and the labels follow in
:mod:`unmix.trajectory.labels` (or, lazily over a cube, in :mod:`unmix.cube.trends`).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ..errors import ShapeError
from ..trend import DEFAULT_CORRECTION, mann_kendall, pettitt, seasonal_kendall, seasonal_sen_slope, sen_slope
from .step_fit import StepLineFit, _as_series, fit_step_and_line

__all__ = ["RankTests", "EffectSizes", "rank_tests", "effect_sizes"]


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


def effect_sizes(y, t, *, confidence: float = 0.95, min_segment: int = 3, season=None) -> EffectSizes:
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
    season : (time,) int ndarray, optional
        Season label of each date; the seasonal Sen slope (pairs within a season only,
        :func:`unmix.trend.seasonal_sen_slope`) replaces the Theil-Sen slope, as the seasonal
        Kendall test replaces Mann-Kendall in :func:`rank_tests`.

    Returns
    -------
    EffectSizes

    References
    ----------
    Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's tau. JASA 63(324),
    1379-1389. https://doi.org/10.1080/01621459.1968.10480934
    Hirsch, R. M., Slack, J. R., & Smith, R. A. (1982). Techniques of trend analysis for monthly
    water quality data. Water Resources Research 18(1), 107-121.
    https://doi.org/10.1029/WR018i001p00107

    Examples
    --------
    >>> import numpy as np
    >>> e = effect_sizes(np.linspace(0.6, 0.2, 20), np.arange(20.0))
    >>> round(float(e.slope), 4)
    -0.0211
    """
    y, t = _as_series(y, t)
    dtype = y.dtype
    if season is not None:
        season = np.asarray(season)
        if season.shape != t.shape:
            raise ShapeError(f"season must hold one label per date, shape {t.shape}; got {season.shape}")
        ss = seasonal_sen_slope(y, season, t, axis=-1, confidence=confidence)
    else:
        ss = sen_slope(y, t, axis=-1, confidence=confidence)
    return EffectSizes(
        slope=np.asarray(ss.slope, dtype=dtype),
        slope_low=np.asarray(ss.low, dtype=dtype),
        slope_high=np.asarray(ss.high, dtype=dtype),
        intercept=np.asarray(ss.intercept, dtype=dtype),
        fit=fit_step_and_line(y, t, min_segment=min_segment),
    )
