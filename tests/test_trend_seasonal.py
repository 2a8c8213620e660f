"""Tests of unmix.trend.seasonal_kendall and unmix.trend.seasonal_sen_slope (Hirsch, Slack & Smith 1982).

References used: pymannkendall (seasonal test, seasonal Sen slope), unmix.trend.mann_kendall and
scipy.stats.theilslopes for the one-season case, and a slow obvious interval reference below
(Gilbert 1987 ranks).
"""

from __future__ import annotations

import math

import numpy as np
import pymannkendall as pmk
import pytest
from _trend_helpers import HOLY_CROSS, _series_with_ties_and_nans
from scipy import stats

from unmix.errors import InputError, ShapeError
from unmix.trend import mann_kendall, seasonal_kendall, seasonal_sen_slope, sen_slope


# ---------------------------------------------------------------------------------------------
# Seasonal Kendall
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("period", [4, 12])
def test_seasonal_kendall_matches_pymannkendall(period):
    # pymannkendall.seasonal_test on a regular series (season = step mod period), NaNs included
    rng = np.random.default_rng(period)
    n = 6 * period + period // 2  # not a whole number of cycles
    y = _series_with_ties_and_nans(rng, 120, n, min_valid=3 * period)
    y += np.sin(2 * np.pi * np.arange(n) / period)
    res = seasonal_kendall(y, season=np.arange(n) % period)
    labels = np.array([f"s{k % period:02d}" for k in range(n)])  # any hashable labels
    res_lab = seasonal_kendall(y, season=labels)
    np.testing.assert_array_equal(res.z, res_lab.z)
    for r in range(y.shape[0]):
        ref = pmk.seasonal_test(y[r], period=period)
        assert res.s[r] == ref.s
        assert res.var_s[r] == pytest.approx(ref.var_s, rel=1e-12)
        assert res.z[r] == pytest.approx(ref.z, rel=1e-9, abs=1e-12)
        assert res.p_value[r] == pytest.approx(ref.p, rel=1e-8, abs=1e-14)
        assert res.tau[r] == pytest.approx(ref.Tau, rel=1e-12)


def test_seasonal_kendall_one_season_is_mann_kendall_normal_p():
    # one season: S and Var equal the Mann-Kendall ones (Hirsch et al. 1982 reduce to Mann 1945)
    r1 = seasonal_kendall(HOLY_CROSS, season=np.zeros(14))
    r0 = mann_kendall(HOLY_CROSS)
    assert (r1.s, r1.var_s, r1.z) == (r0.s, r0.var_s, r0.z)
    with pytest.raises(ShapeError, match="season"):
        seasonal_kendall(HOLY_CROSS, season=np.zeros(3))


# ---------------------------------------------------------------------------------------------
# Seasonal Sen slope (Hirsch, Slack & Smith 1982)
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("period", [4, 12])
def test_seasonal_sen_slope_matches_pymannkendall(period):
    # pymannkendall.seasonal_sens_slope(x, period) works per index with a cycle as the unit of
    # time: with t = t0 + step / period [decimal years] a cycle is one year, so its slope is ours
    # per year, and its intercept (origin at step 0) is ours + slope * t0. NaNs, ties, a partial
    # last cycle and a seasonal wave included.
    rng = np.random.default_rng(100 + period)
    n = 6 * period + period // 2
    y = _series_with_ties_and_nans(rng, 150, n, min_valid=3 * period)
    y += np.round(np.sin(2 * np.pi * np.arange(n) / period), 1)
    season = np.arange(n) % period
    for t0 in (0.0, 2013.0):
        t = t0 + np.arange(n) / period
        res = seasonal_sen_slope(y, season, t)
        for r in range(y.shape[0]):
            ref = pmk.seasonal_sens_slope(y[r], period=period)
            assert res.slope[r] == pytest.approx(ref.slope, rel=1e-9, abs=1e-12), r
            assert res.intercept[r] + res.slope[r] * t0 == pytest.approx(ref.intercept, rel=1e-9, abs=1e-9), r


def _seasonal_sen_interval_reference(y, season, t, confidence):
    # slow obvious implementation: the within-season slopes sorted, Gilbert's (1987) ranks
    # M1 = (N' - C)/2, M2 = (N' + C)/2 + 1 (1-based), C = z sqrt(Var S), Var S the seasonal
    # Kendall variance (pymannkendall.seasonal_test), rounded half-even as scipy.stats.theilslopes
    slopes = []
    for g in np.unique(season):
        ok = (season == g) & ~np.isnan(y)
        yy, tt = y[ok], t[ok]
        slopes += [(yy[j] - yy[i]) / (tt[j] - tt[i]) for i in range(yy.size) for j in range(i + 1, yy.size)]
    slopes = np.sort(slopes)
    var_s = pmk.seasonal_test(y, period=int(season.max()) + 1).var_s
    c = stats.norm.ppf(0.5 + confidence / 2) * math.sqrt(var_s)
    n = slopes.size
    lo = max(int(np.round((n - c) / 2)) - 1, 0)
    hi = min(int(np.round((n + c) / 2)), n - 1)
    return slopes[lo], slopes[hi]


@pytest.mark.parametrize("confidence", [0.95, 0.8])
def test_seasonal_sen_slope_interval(confidence):
    rng = np.random.default_rng(int(confidence * 100))
    period, n = 4, 30
    y = _series_with_ties_and_nans(rng, 60, n, min_valid=16)
    season = np.arange(n) % period
    t = 2010 + np.arange(n) / period
    res = seasonal_sen_slope(y, season, t, confidence=confidence)
    for r in range(y.shape[0]):
        lo, hi = _seasonal_sen_interval_reference(y[r], season, t, confidence)
        assert (res.low[r], res.high[r]) == (pytest.approx(lo, rel=1e-9), pytest.approx(hi, rel=1e-9)), r
    # one season: the Theil-Sen slope and interval (scipy.stats.theilslopes, checked above)
    one = seasonal_sen_slope(y, np.zeros(n), t, confidence=confidence)
    for r in range(0, 60, 7):
        ok = ~np.isnan(y[r])
        ref = stats.theilslopes(y[r, ok], t[ok], alpha=confidence)
        np.testing.assert_allclose([one.slope[r], one.intercept[r], one.low[r], one.high[r]],
                                   [ref.slope, ref.intercept, ref.low_slope, ref.high_slope],
                                   rtol=1e-10, atol=1e-9)


def test_seasonal_sen_slope_ignores_cross_season_pairs_and_keeps_dtype():
    # a sawtooth season (slow green-up, sudden drop) over 2.5 cycles turns the plain Sen slope
    # positive; the within-season pairs see only the trend (Hirsch et al. 1982): a noise-free
    # -0.02 per year is found
    t = 2015 + np.arange(30) / 12
    y = (0.4 + 0.2 * (np.arange(30) % 12) / 11 - 0.02 * (t - 2015)).astype(np.float32)
    r = seasonal_sen_slope(y, np.arange(30) % 12, t)
    assert r.slope.dtype == np.float32
    assert r.slope == pytest.approx(-0.02, rel=1e-4)
    assert sen_slope(y, t).slope > 0  # the plain Sen slope is misled by the season
    # unsorted times: the same after sorting (season labels travel with their steps)
    perm = np.random.default_rng(0).permutation(30)
    rp = seasonal_sen_slope(y[perm], (np.arange(30) % 12)[perm], t[perm])
    assert rp.slope == r.slope and rp.low == r.low
    # no season holds two valid values: NaN (documented)
    assert np.isnan(seasonal_sen_slope(np.arange(4.0), np.arange(4)).slope)
    with pytest.raises(ShapeError, match="season"):
        seasonal_sen_slope(y, np.zeros(3), t)
    with pytest.raises(InputError, match="confidence level"):
        seasonal_sen_slope(y, np.zeros(30), t, confidence=1.5)
