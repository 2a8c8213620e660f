"""Least-squares line and single-step (change in mean) fits of fraction series, compared by BIC.

:func:`fit_step_and_line` fits both models to every series (a numba kernel, parallel over series);
``_step_preferred`` tells where the step model has the lower Bayesian information criterion
``BIC = n ln(RSS/n) + k ln(n)`` (k = 3 for the step, 2 for the line).

References
----------
Hinkley, D. V. (1970). Inference about the change-point in a sequence of random variables.
Biometrika 57(1), 1-17. https://doi.org/10.1093/biomet/57.1.1
Schwarz, G. (1978). Estimating the dimension of a model. Annals of Statistics 6(2), 461-464.
https://doi.org/10.1214/aos/1176344136
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numba import njit, prange

from ..errors import InputError, ShapeError

__all__ = ["StepLineFit", "fit_step_and_line"]

_MIN_RSS_PER_DATE = 1e-12  # (1e-6 fraction)^2: floors the RSS so that exact fits stay finite in BIC


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
