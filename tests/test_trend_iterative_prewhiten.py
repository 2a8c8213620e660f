"""Tests of unmix.trend.iterative_prewhiten (iterative pre-whitening of a series before Mann-Kendall).

No general-purpose library implements it, so its parts are checked separately: a slow obvious
implementation below, statsmodels (acf), scipy.stats (theilslopes) and pymannkendall (original
test on the whitened series).
"""

from __future__ import annotations

import math

import numpy as np
import pymannkendall as pmk
import pytest
from _trend_helpers import _ar1
from scipy import stats
from statsmodels.tsa.stattools import acf

from unmix.trend import iterative_prewhiten, mann_kendall


# ---------------------------------------------------------------------------------------------
# iterative pre-whitening (no library implements it: its parts are checked separately)
# ---------------------------------------------------------------------------------------------
def _iterative_prewhiten_reference(x):
    """Slow, obvious re-implementation of the procedure documented in ``iterative_prewhiten``
    (Zhang et al. 2000; Wang & Swail 2001), built on general-purpose parts: Sen slopes from
    scipy.stats.theilslopes, the lag-1 autocorrelation from statsmodels' acf (biased 1/n
    autocovariance, the same estimator), Kendall's (1954) bias correction (n r + 1) / (n - 4)."""
    n = x.size
    t = np.arange(n, dtype=float)
    b0 = stats.theilslopes(x, t).slope
    if n < 5:
        return 0.0, b0, x
    b, rho, w = b0, -1.0, x
    for _ in range(20):
        d = x - b * t
        sd = d.std()
        r = acf(d, nlags=1, fft=False)[1] if sd > 0 else 0.0
        new = (n * r + 1) / (n - 4) if sd > 0 else 0.0
        new = 0.0 if new < 0.05 else min(new, 0.99)
        if new == 0.0:
            w, new_b = x, b0
        else:
            w = (x[1:] - new * x[:-1]) / (1 - new)
            new_b = stats.theilslopes(w, t[1:]).slope
        done = (abs(new - rho) <= max(0.01 * abs(rho), 1e-4)
                and abs(new_b - b) <= max(0.01 * abs(b), 1e-4 * sd / (n - 1)))
        b, rho = new_b, new
        if done:
            break
    return rho, b, w


def test_iterative_prewhiten_matches_slow_reference():
    # rho, slope and the whitened series against the slow reference above (statsmodels acf,
    # scipy theilslopes); NaN gaps are closed as documented
    rng = np.random.default_rng(21)
    n = 30
    y = 0.05 * rng.normal(size=(200, 1)) * np.arange(n) + _ar1(rng, 200, n, 0.5)
    y[rng.random(y.shape) < 0.1] = np.nan
    y[:3, 4:] = np.nan  # a few 4-value series: never whitened
    res = iterative_prewhiten(y)
    whitened = 0
    for r in range(y.shape[0]):
        x = y[r][~np.isnan(y[r])]
        rho, b, w = _iterative_prewhiten_reference(x)
        # rounding differences (summation order) grow a little over the rounds: 1e-7
        assert res.rho[r] == pytest.approx(rho, rel=1e-7, abs=1e-12), r
        assert res.slope[r] == pytest.approx(b, rel=1e-7, abs=1e-12), r
        got = res.series[r]
        np.testing.assert_allclose(got[: w.size], w, rtol=1e-7, atol=1e-9, err_msg=str(r))
        assert np.isnan(got[w.size:]).all()
        whitened += rho > 0
    assert 100 <= whitened < y.shape[0]  # both branches (whitened and not) are exercised


def test_iterative_prewhiten_long_and_cycling_series_match_slow_reference():
    # series that take many rounds, most of them caught in a two-round cycle of the Sen median
    # until the 20-round cap (the kernel jumps to the last round once a cycle repeats): rho, the
    # slope of the last round and the whitened series against the slow reference above
    # (statsmodels acf, scipy theilslopes), which runs every round
    rng = np.random.default_rng(31)
    n = 40
    y = 0.004 * rng.normal(size=(4000, 1)) * np.arange(n) + 0.03 * _ar1(rng, 4000, n, 0.4)
    y = np.round(y, 3)  # quantised like stored fractions: the median jumps between few values
    res = iterative_prewhiten(y)
    rows = np.flatnonzero(res.iterations >= 8)[:40]
    assert (res.iterations[rows] == 20).sum() >= 10  # the cycle jump is exercised
    for r in rows:
        rho, b, w = _iterative_prewhiten_reference(y[r])
        assert res.rho[r] == pytest.approx(rho, rel=1e-7, abs=1e-12), r
        assert res.slope[r] == pytest.approx(b, rel=1e-7, abs=1e-12), r
        np.testing.assert_allclose(res.series[r][: w.size], w, rtol=1e-7, atol=1e-9,
                                   err_msg=str(r))


def test_mann_kendall_iterative_prewhiten_runs_on_the_whitened_series():
    # the test skips the last Sen median when a count shows it within the convergence
    # tolerance; the series it tests must still be exactly the one iterative_prewhiten returns:
    # S and Var(S) against pymannkendall.original_test on that series (ties at the rounding
    # tolerance skipped, as above)
    rng = np.random.default_rng(37)
    n = 40
    y = 0.004 * rng.normal(size=(300, 1)) * np.arange(n) + 0.03 * _ar1(rng, 300, n, 0.5)
    res = mann_kendall(y, correction="iterative-prewhiten")
    pw = iterative_prewhiten(y)
    compared = 0
    for r in range(y.shape[0]):
        w = pw.series[r][~np.isnan(pw.series[r])]
        diff = np.abs(w[:, None] - w[None, :])
        if pw.rho[r] > 0 and ((diff > 0) & (diff < 1e-9 * np.abs(w).max())).any():
            continue
        ref = pmk.original_test(w)
        assert res.s[r] == ref.s, r
        assert res.var_s[r] == pytest.approx(ref.var_s, rel=1e-12), r
        compared += 1
    assert compared >= 250


def test_iterative_prewhiten_autocorrelation_is_bias_corrected_acf_of_detrended_series():
    # at convergence the final rho is the bias-corrected lag-1 autocorrelation of the series
    # detrended by (within the 1 % convergence tolerance) the final slope: statsmodels acf
    rng = np.random.default_rng(22)
    n = 40
    y = 0.1 * np.arange(n) + _ar1(rng, 100, n, 0.7)
    res = iterative_prewhiten(y)
    assert (res.rho > 0).mean() > 0.9
    for r in np.flatnonzero((res.rho > 0) & (res.iterations < 20)):
        d = y[r] - res.slope[r] * np.arange(n)
        r1 = acf(d, nlags=1, fft=False)[1]
        # Kendall (1954) inversion of E[r] ~ rho - (1 + 4 rho)/n; tolerance from the 1 % slope
        # convergence rule
        assert res.rho[r] == pytest.approx(min((n * r1 + 1) / (n - 4), 0.99), abs=0.02), r
        # the whitened series is (x_t - rho x_{t-1}) / (1 - rho) (numpy, definition)
        w = (y[r, 1:] - res.rho[r] * y[r, :-1]) / (1 - res.rho[r])
        np.testing.assert_allclose(res.series[r, :-1], w, rtol=1e-12, atol=1e-12)


def test_iterative_prewhiten_test_is_original_test_on_whitened_series():
    # the Mann-Kendall statistics equal pymannkendall.original_test on the series the test runs
    # on (whitened or, below the threshold, the original values)
    rng = np.random.default_rng(23)
    n = 30
    y = 0.04 * rng.normal(size=(250, 1)) * np.arange(n) + _ar1(rng, 250, n, 0.4)
    y = np.round(y, 1)  # ties in the original values
    y[rng.random(y.shape) < 0.1] = np.nan
    res = mann_kendall(y, correction="iterative-prewhiten")
    pw = iterative_prewhiten(y)
    compared = 0
    for r in range(y.shape[0]):
        w = pw.series[r][~np.isnan(pw.series[r])]
        diff = np.abs(w[:, None] - w[None, :])
        if pw.rho[r] > 0 and ((diff > 0) & (diff < 1e-9 * np.abs(w).max())).any():
            continue  # rounding near-ties: documented tolerance, pymannkendall lets bits decide
        ref = pmk.original_test(w)
        assert res.n[r] == np.isfinite(y[r]).sum()
        assert res.s[r] == ref.s, r
        assert res.var_s[r] == pytest.approx(ref.var_s, rel=1e-12), r
        assert res.z[r] == pytest.approx(ref.z, rel=1e-9, abs=1e-12), r
        assert res.p_value[r] == pytest.approx(ref.p, rel=1e-8, abs=1e-14), r
        assert res.tau[r] == pytest.approx(ref.Tau, rel=1e-12), r
        compared += 1
    assert compared >= 200


def test_iterative_prewhiten_properties():
    rng = np.random.default_rng(24)
    n = 30
    y = np.round(4 * (0.05 * rng.normal(size=(300, 1)) * np.arange(n)
                      + _ar1(rng, 300, n, 0.5))) / 4  # on a 1/4 grid: shifts are exact
    a = mann_kendall(y, correction="iterative-prewhiten")
    # negation flips S and Z exactly (every step is linear or odd in the values)
    b = mann_kendall(-y, correction="iterative-prewhiten")
    np.testing.assert_array_equal(a.s, -b.s)
    np.testing.assert_allclose(a.z, -b.z, rtol=1e-12, atol=1e-14)
    # time reversal: the whitening filter is not symmetric in time, so S is not exactly -S, but
    # the sign flips wherever the trend is clear
    c = mann_kendall(y[:, ::-1], correction="iterative-prewhiten")
    clear = a.p_value < 0.01
    assert clear.sum() > 30
    assert (np.sign(c.s[clear]) == -np.sign(a.s[clear])).all()
    # a constant added changes nothing (rank-based; the whitened series moves by the constant)
    d = mann_kendall(y + 8.0, correction="iterative-prewhiten")
    np.testing.assert_array_equal(a.s, d.s)
    np.testing.assert_allclose(a.z, d.z, rtol=1e-9, atol=1e-12)
    # batched equals one by one
    for r in range(0, 300, 37):
        one = mann_kendall(y[r], correction="iterative-prewhiten")
        assert (one.s, one.z, one.p_value) == (a.s[r], a.z[r], a.p_value[r])


def test_iterative_prewhiten_white_noise_and_strong_trend():
    # white noise: false-positive rate near nominal 0.05 (2000 series: binomial sd 0.005);
    # strong trend (3 noise sd over the record, AR(1) phi = 0.6, n = 40): detected far more often
    # than by plain pre-whitening, which whitens the trend away (Zhang et al. 2000; Wang & Swail
    # 2001; the study in benchmarks/study_correction.py)
    rng = np.random.default_rng(25)
    noise = rng.standard_normal((2000, 30))
    fpr = np.mean(mann_kendall(noise, correction="iterative-prewhiten").p_value < 0.05)
    assert 0.025 <= fpr <= 0.07
    y = _ar1(rng, 2000, 40, 0.6) + 3.0 * np.arange(40) / 39
    pw_ipw = np.mean(mann_kendall(y, correction="iterative-prewhiten").p_value < 0.05)
    pw_plain = np.mean(mann_kendall(y, correction="prewhiten").p_value < 0.05)
    assert pw_ipw >= 0.55
    assert pw_ipw >= pw_plain + 0.2


def test_iterative_prewhiten_exactly_linear_series_is_not_whitened():
    # documented: a detrended series without variance carries no autocorrelation (rho = 0), so a
    # noise-free ramp is tested as is: S = n(n-1)/2, the exact small-n p for n = 8 (Kendall 1975:
    # P(S = 28) = 1/8! one-sided)
    r = iterative_prewhiten(np.arange(8.0))
    assert r.rho == 0 and r.slope == 1
    m = mann_kendall(np.arange(8.0), correction="iterative-prewhiten")
    assert m.s == 28
    assert m.p_value == pytest.approx(2 / math.factorial(8), rel=1e-12)
