"""Tests of unmix.trend against published worked examples and general-purpose references.

References used: pymannkendall (original / pre-whitening / trend-free pre-whitening / Hamed-Rao /
seasonal tests), scipy.stats (kendalltau, theilslopes, false_discovery_control), statsmodels
(multipletests), the values in ../shared/CHECKS.md, and slow obvious implementations below.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pymannkendall as pmk
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.tsa.stattools import acf

from unmix.errors import InputError, ShapeError, UnknownNameError
from unmix.trend import (
    DEFAULT_CORRECTION,
    MannKendallCorrection,
    fdr,
    iterative_prewhiten,
    mann_kendall,
    pettitt,
    seasonal_kendall,
    seasonal_sen_slope,
    sen_slope,
)

HOLY_CROSS = np.array([12.9, 14.8, 13.2, 15.7, 13.8, 15.6, 12.9, 11.0, 17.3, 15.9, 19.0, 18.3,
                       20.1, 21.7])
PMK = {
    "none": pmk.original_test,
    "prewhiten": pmk.pre_whitening_modification_test,
    "trend-free-prewhiten": pmk.trend_free_pre_whitening_modification_test,
    "hamed-rao": pmk.hamed_rao_modification_test,
}
_PMK_ACF = getattr(pmk.pymannkendall, "__acf")


def _series_with_ties_and_nans(rng, n_series, n_time, min_valid, nan_frac=0.15, decimals=1):
    """AR(1)-ish series with a random trend, rounded (ties) and with NaN gaps."""
    e = rng.standard_normal((n_series, n_time))
    for k in range(1, n_time):
        e[:, k] += 0.4 * e[:, k - 1]
    slope = rng.normal(0, 0.08, (n_series, 1))
    y = np.round(e + slope * np.arange(n_time), decimals)
    mask = rng.random((n_series, n_time)) < nan_frac
    # keep at least min_valid valid values in every series
    for r in range(n_series):
        while (~mask[r]).sum() < min_valid:
            mask[r, rng.integers(n_time)] = False
    y[mask] = np.nan
    return y


# ---------------------------------------------------------------------------------------------
# Mann-Kendall: published worked examples (CHECKS.md)
# ---------------------------------------------------------------------------------------------
def test_mann_kendall_holy_cross_worked_example():
    # "Mann-Kendall by hand", College of the Holy Cross (CHECKS.md): S=54, Var=332.667, Z=2.9058,
    # two-sided p 0.00366, tau 0.5934
    r = mann_kendall(HOLY_CROSS)
    assert r.s == 54
    assert r.var_s == pytest.approx(332.667, abs=1e-3)
    assert r.z == pytest.approx(2.9058, abs=1e-4)
    assert r.p_value == pytest.approx(0.00366, abs=1e-5)
    assert r.tau == pytest.approx(0.5934, abs=1e-4)
    assert r.n == 14


def test_mann_kendall_epa_two_tie_groups():
    # US EPA QA/G-9S example as quoted in CHECKS.md (from memory): S=22, Var=155.33, Z=1.685
    r = mann_kendall([10, 10, 10, 5, 10, 20, 18, 17, 15, 24, 15])
    assert r.s == 22
    assert r.var_s == pytest.approx(155.33, abs=5e-3)
    assert r.z == pytest.approx(1.685, abs=5e-4)


@pytest.mark.parametrize(
    ("y", "one_sided"),
    [  # CHECKS.md: exact null distribution P(S >= s) (enumeration; Kendall's tables, Gilbert A18)
        ([1, 2, 3, 4], 0.0417),  # n=4, s=6
        ([2, 1, 3, 4], 0.1667),  # n=4, s=4
        ([1, 2, 3, 4, 5], 0.0083),  # n=5, s=10
        ([2, 1, 3, 4, 5], 0.0417),  # n=5, s=8
        ([1, 2, 3, 4, 5, 6], 0.0014),  # n=6, s=15
        ([2, 1, 3, 4, 5, 6], 0.0083),  # n=6, s=13
    ],
)
def test_exact_small_n_null_distribution(y, one_sided):
    r = mann_kendall(np.asarray(y, float))
    assert r.p_value / 2 == pytest.approx(one_sided, abs=5e-5)
    # decreasing series give the same two-sided p
    assert mann_kendall(-np.asarray(y, float)).p_value == r.p_value


def _exact_p_by_enumeration(n, s):
    # slow obvious reference: enumerate all n! orders
    count = 0
    total = 0
    for perm in itertools.permutations(range(n)):
        sp = sum(np.sign(perm[j] - perm[i]) for i in range(n) for j in range(i + 1, n))
        count += abs(sp) >= abs(s)
        total += 1
    return count / total


def test_exact_p_matches_scipy_kendalltau_exact():
    # scipy.stats.kendalltau(method="exact") gives the exact two-sided permutation p-value of S
    rng = np.random.default_rng(1)
    y = np.array([rng.permutation(10) for _ in range(300)], float)
    lengths = rng.integers(3, 11, size=300)
    for r, m in enumerate(lengths):
        y[r, m:] = np.nan
    res = mann_kendall(y)
    for r, m in enumerate(lengths):
        ref = stats.kendalltau(np.arange(m), y[r, :m], method="exact").pvalue
        assert res.p_value[r] == pytest.approx(ref, rel=1e-10, abs=1e-14), (r, m)
    # and one small case by brute-force enumeration
    small = np.array([3.0, 1.0, 4.0, 2.0, 5.0])
    assert mann_kendall(small).p_value == pytest.approx(
        _exact_p_by_enumeration(5, mann_kendall(small).s), rel=1e-12)


# ---------------------------------------------------------------------------------------------
# Mann-Kendall against pymannkendall on many generated series (ties + NaN)
# ---------------------------------------------------------------------------------------------
def _has_rounding_ties(x, correction, slope):
    """True if the pre-whitened (or, for Hamed-Rao, detrended) series, computed as in
    pymannkendall's source, has two values that are equal in exact arithmetic but differ by
    rounding; there the reference's S (or ranks) depend on the last bit while ours counts them as
    ties (documented tolerance)."""
    n = x.size
    if correction == "hamed-rao":  # ranks of the detrended series
        w = x - np.arange(1, n + 1) * slope
    elif correction == "none":
        return False
    else:
        b = slope if correction == "trend-free-prewhiten" else 0.0
        xd = x - np.arange(1, n + 1) * b
        r1 = _PMK_ACF(xd, nlags=1)[1]  # the reference's own lag-1 autocorrelation, to the bit
        w = xd[1:] - xd[:-1] * r1 + np.arange(1, n) * b
    diff = np.abs(w[:, None] - w[None, :])
    return bool(((diff > 0) & (diff < 1e-9 * np.abs(w).max())).any())


@pytest.mark.filterwarnings("ignore:invalid value encountered in sqrt:RuntimeWarning")
@pytest.mark.parametrize("correction", list(PMK))
def test_mann_kendall_matches_pymannkendall(correction):
    # pymannkendall tests, run on the series after dropping NaN (our kernels drop NaN per series).
    # At least 12 valid values, so the series S is computed on has > 10 values and the normal p
    # applies (pymannkendall has no exact small-n p).
    rng = np.random.default_rng(list(PMK).index(correction))
    y = _series_with_ties_and_nans(rng, 250, 30, min_valid=12)
    res = mann_kendall(y, correction=correction)
    func = PMK[correction]
    skipped = 0
    for r in range(y.shape[0]):
        x = y[r][~np.isnan(y[r])]
        ref = func(x)
        if _has_rounding_ties(x, correction, ref.slope):
            skipped += 1
            continue
        assert res.n[r] == x.size
        assert res.s[r] == ref.s, r
        assert res.var_s[r] == pytest.approx(ref.var_s, rel=1e-9), r
        if np.isfinite(ref.z):
            assert res.z[r] == pytest.approx(ref.z, rel=1e-9, abs=1e-12), r
            assert res.p_value[r] == pytest.approx(ref.p, rel=1e-8, abs=1e-14), r
        else:  # Hamed-Rao factor <= 0: pymannkendall's sqrt of a negative variance is NaN too
            assert np.isnan(res.z[r]) and np.isnan(res.p_value[r])
        assert res.tau[r] == pytest.approx(ref.Tau, rel=1e-12), r
    # near-ties are rare after pre-whitening; for Hamed-Rao the pair that sets the Sen slope is an
    # exact tie of the detrended series in about half of the series, so fewer are compared there
    assert y.shape[0] - skipped >= 100


def test_mann_kendall_float32_and_3d_batch_equals_one_by_one():
    # batched 3-d input equals series-by-series calls (property); statistics are float64
    rng = np.random.default_rng(2)
    y = _series_with_ties_and_nans(rng, 24, 20, min_valid=3).reshape(2, 3, 4, 20)
    y = np.moveaxis(y, -1, 1).astype(np.float32)  # time on axis 1
    for corr in MannKendallCorrection:
        res = mann_kendall(y, axis=1, correction=corr)
        assert res.z.shape == (2, 3, 4) and res.z.dtype == np.float64
        assert res.n.dtype == np.int64
        for a, b, c in np.ndindex(2, 3, 4):
            one = mann_kendall(y[a, :, b, c], correction=corr)
            for field in ("s", "var_s", "z", "p_value", "tau", "n"):
                np.testing.assert_equal(getattr(res, field)[a, b, c], getattr(one, field))


def test_mann_kendall_nan_dropped_equals_compacted():
    rng = np.random.default_rng(3)
    y = _series_with_ties_and_nans(rng, 50, 25, min_valid=5)
    for corr in MannKendallCorrection:
        res = mann_kendall(y, correction=corr)
        for r in range(0, 50, 7):
            one = mann_kendall(y[r][~np.isnan(y[r])], correction=corr)
            np.testing.assert_equal([res.s[r], res.z[r], res.p_value[r]],
                                    [one.s, one.z, one.p_value])


def test_mann_kendall_reverse_flips_sign_and_constant_changes_nothing():
    # property (Mann 1945 statistic is antisymmetric under time reversal; rank-based = shift-free).
    # Values on a 1/4 grid so that the added constant is exact in binary.
    rng = np.random.default_rng(4)
    y = np.round(rng.normal(size=(200, 20)) * 4) / 4 + 0.03 * np.arange(20)
    y = np.round(y * 4) / 4
    for corr in ("none", "hamed-rao"):
        a = mann_kendall(y, correction=corr)
        b = mann_kendall(y[:, ::-1], correction=corr)
        np.testing.assert_array_equal(a.s, -b.s)
        np.testing.assert_allclose(a.z, -b.z, rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(a.p_value, b.p_value, rtol=1e-12)
    for corr in MannKendallCorrection:
        a = mann_kendall(y, correction=corr)
        c = mann_kendall(y + 8.0, correction=corr)
        np.testing.assert_array_equal(a.s, c.s)
        np.testing.assert_allclose(a.z, c.z, rtol=1e-9, atol=1e-12)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(-3, 3), min_size=3, max_size=25))
def test_mann_kendall_reverse_property_hypothesis(vals):
    y = np.asarray(vals, float)
    a = mann_kendall(y)
    b = mann_kendall(y[::-1])
    assert a.s == -b.s
    assert a.var_s == b.var_s
    assert a.p_value == pytest.approx(b.p_value, rel=1e-12)


def test_mann_kendall_irregular_and_tied_times_match_scipy_kendalltau():
    # t orders the values; pairs with equal t count zero and Var(S) is Kendall's two-way tie formula,
    # the same S and variance as scipy.stats.kendalltau(t, y, method="asymptotic") (whose z has no
    # continuity correction, so compare S / sqrt(Var S)).
    rng = np.random.default_rng(5)
    t = np.sort(rng.choice(np.arange(2000.0, 2010.0, 0.25), 30))  # repeated dates
    perm = rng.permutation(30)
    y = np.round(rng.normal(size=(150, 30)) + 0.05 * (t - 2000), 1)
    y[rng.random(y.shape) < 0.1] = np.nan
    res = mann_kendall(y[:, perm], t=t[perm])  # unsorted t must be sorted by the kernel
    for r in range(150):
        ok = ~np.isnan(y[r])
        ref = stats.kendalltau(t[ok], y[r, ok], method="asymptotic")
        zref = stats.norm.isf(ref.pvalue / 2)
        ours = abs(res.s[r]) / math.sqrt(res.var_s[r])
        assert ours == pytest.approx(zref, rel=1e-7, abs=1e-9), r


def test_mann_kendall_edge_cases():
    # documented choices: < 3 valid values -> NaN; all equal -> S=0, Var=0, Z=0, p=1
    y = np.array([[np.nan] * 5, [1.0, np.nan, 2.0, np.nan, np.nan], [0.2] * 4 + [np.nan]])
    for corr in MannKendallCorrection:
        r = mann_kendall(y, correction=corr)
        assert np.isnan(r.s[:2]).all() and np.isnan(r.p_value[:2]).all()
        np.testing.assert_array_equal(r.n, [0, 2, 4])
        assert (r.s[2], r.var_s[2], r.z[2], r.p_value[2]) == (0, 0, 0, 1)


def _ar1(rng, n_series, n, phi):
    """AR(1) noise with unit marginal variance, started from the stationary distribution."""
    x = np.empty((n_series, n))
    x[:, 0] = rng.standard_normal(n_series)
    for k in range(1, n):
        x[:, k] = phi * x[:, k - 1] + np.sqrt(1 - phi**2) * rng.standard_normal(n_series)
    return x


def test_default_correction_controls_false_positives_under_ar1():
    # project requirement (study in benchmarks/study_correction.py): the default correction keeps
    # the false-positive rate <= 0.10 at nominal 0.05 for AR(1) noise, phi = 0.6, n = 30. The
    # uncorrected test must exceed it on the same data (Hamed & Rao 1998; Yue et al. 2002 report
    # the inflation), otherwise the check would not discriminate.
    rng = np.random.default_rng(11)
    x = _ar1(rng, 2000, 30, 0.6)
    fpr_default = np.mean(mann_kendall(x, correction=DEFAULT_CORRECTION).p_value < 0.05)
    fpr_none = np.mean(mann_kendall(x, correction="none").p_value < 0.05)
    assert fpr_default <= 0.10
    assert fpr_none > 0.15


def test_default_correction_keeps_power_on_slow_fraction_trends():
    # project requirement (the tool's main job): a slow linear fraction decline of 0.01 per year
    # over ten years of quarterly dates with AR(1) noise (phi = 0.3, sd 0.01) is found in most
    # pixels by the default. Plain lag-1 pre-whitening (von Storch 1995) whitens much of such a
    # trend away (Yue et al. 2002; Zhang et al. 2000 motivate the iteration with this), so it must
    # do clearly worse on the same data, or the check would not discriminate.
    rng = np.random.default_rng(12)
    t = 2015 + np.arange(40) / 4
    y = 0.4 - 0.01 * (t - 2015) + 0.01 * _ar1(rng, 2000, 40, 0.3)
    power_default = np.mean(mann_kendall(y, t, correction=DEFAULT_CORRECTION).p_value < 0.05)
    power_pw = np.mean(mann_kendall(y, t, correction="prewhiten").p_value < 0.05)
    assert power_default >= 0.9
    assert power_pw <= 0.8


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


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 6), min_size=1, max_size=80), st.data())
def test_private_select_matches_sort(vals, data):
    # the quickselect behind the Sen medians of the corrections, against numpy's sort
    from unmix.trend._median_numba import _select

    a = np.asarray(vals, float)
    k = data.draw(st.integers(0, a.size - 1))
    b = a.copy()
    _select(b, 0, b.size, k, np.empty(b.size))
    assert b[k] == np.sort(a)[k]
    assert (b[:k] <= b[k]).all() and (b[k + 1:] >= b[k]).all()


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 900), st.integers(0, 2**32 - 1), st.sampled_from([2, 10, 1000, 0]))
def test_private_median_band_matches_numpy_median(m, seed, levels):
    # the sampled-band median behind the Sen slopes of the corrections, against numpy.median;
    # few distinct levels (many ties), sorted and reversed inputs exercise the fallback path
    from unmix.trend._median_numba import _median_band

    rng = np.random.default_rng(seed)
    a = rng.integers(0, levels, m).astype(float) if levels else rng.standard_normal(m)
    for b in (a, np.sort(a), np.sort(a)[::-1].copy()):
        assert _median_band(b.copy(), m, np.empty(m)) == np.median(b)


@settings(max_examples=60, deadline=None)
@given(st.integers(127, 900), st.integers(0, 2**32 - 1), st.sampled_from([2, 10, 1000, 0]),
       st.floats(-3, 3), st.floats(0, 3))
def test_private_median_band_hint_matches_numpy_median(m, seed, levels, centre, half):
    # the median with a band hint (from a previous median; it may miss, be too wide or NaN)
    # against numpy.median
    from unmix.trend._median_numba import _median_band_hint

    rng = np.random.default_rng(seed)
    a = rng.integers(0, levels, m).astype(float) if levels else rng.standard_normal(m)
    if levels:
        centre, half = (centre + 3) * levels / 6, half * levels / 6
    for lo, hi in ((centre - half, centre + half), (np.nan, np.nan)):
        med, _, _ = _median_band_hint(a.copy(), m, np.empty(m), lo, hi)
        assert med == np.median(a)


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 900), st.integers(0, 2**32 - 1), st.sampled_from([3, 1000, 0]),
       st.floats(-2, 2), st.floats(0, 2))
def test_private_median_within_matches_order_statistics(m, seed, levels, centre, half):
    # True exactly when both middle order statistics (numpy's sort) lie in [lo, hi]; with the
    # number of values in the band
    from unmix.trend._median_numba import _median_within

    rng = np.random.default_rng(seed)
    a = rng.integers(0, levels, m).astype(float) if levels else rng.standard_normal(m)
    lo, hi = centre - half, centre + half
    srt = np.sort(a)
    mid = srt[[(m - 1) // 2, m // 2]]
    within, n_band = _median_within(a, m, lo, hi)
    assert within == bool(((mid >= lo) & (mid <= hi)).all())
    assert n_band == np.count_nonzero((a >= lo) & (a <= hi))  # values in the band, by numpy
    if within:
        assert lo <= np.median(a) <= hi


def test_mann_kendall_bad_arguments():
    with pytest.raises(UnknownNameError, match="correction"):
        mann_kendall(HOLY_CROSS, correction="yue-wang")
    with pytest.raises(ShapeError, match="t must be 1-d"):
        mann_kendall(HOLY_CROSS, t=np.arange(5.0))
    with pytest.raises(InputError, match="finite"):
        mann_kendall(HOLY_CROSS, t=np.r_[np.arange(13.0), np.nan])
    with pytest.raises(InputError, match="NaN"):
        mann_kendall(np.r_[HOLY_CROSS, np.inf])
    with pytest.raises(InputError, match="decimal years"):
        sen_slope(HOLY_CROSS, t=np.arange(14).astype("datetime64[D]"))
    assert DEFAULT_CORRECTION in set(MannKendallCorrection)


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
# Sen slope
# ---------------------------------------------------------------------------------------------
def test_sen_slope_holy_cross():
    # CHECKS.md (computed; identical to scipy.stats.theilslopes): 0.566667, CI [0.325, 0.866667]
    r = sen_slope(HOLY_CROSS)
    assert r.slope == pytest.approx(0.566667, abs=1e-6)
    assert r.low == pytest.approx(0.325, abs=1e-6)
    assert r.high == pytest.approx(0.866667, abs=1e-6)


@pytest.mark.parametrize("confidence", [0.95, 0.9, 0.99])
def test_sen_slope_matches_scipy_theilslopes(confidence):
    # scipy.stats.theilslopes(y, t, alpha=confidence) on the valid values, irregular tied times,
    # tied values (one decimal) and NaN gaps; slope, intercept and interval must agree
    rng = np.random.default_rng(int(confidence * 100))
    nt = 25
    t = 2000 + np.sort(rng.choice(np.arange(0, 12, 0.25), nt))
    y = _series_with_ties_and_nans(rng, 300, nt, min_valid=2, nan_frac=0.3)
    y[:5, :-2] = np.nan  # a few two-value series
    res = sen_slope(y, t, confidence=confidence)
    for r in range(y.shape[0]):
        ok = ~np.isnan(y[r])
        if np.unique(t[ok]).size < 2:
            assert np.isnan(res.slope[r])
            continue
        ref = stats.theilslopes(y[r, ok], t[ok], alpha=confidence)
        np.testing.assert_allclose(
            [res.slope[r], res.intercept[r], res.low[r], res.high[r]],
            [ref.slope, ref.intercept, ref.low_slope, ref.high_slope], rtol=1e-10, atol=1e-9,
            err_msg=f"series {r}")


def test_sen_slope_properties_and_dtype():
    rng = np.random.default_rng(7)
    y = _series_with_ties_and_nans(rng, 40, 18, min_valid=4).astype(np.float32)
    t = np.linspace(2001.0, 2018.5, 18)
    r = sen_slope(y, t)
    assert r.slope.dtype == np.float32 and r.low.dtype == np.float32  # float32 stays float32
    # reversing the series flips slope sign and swaps the interval (property)
    rr = sen_slope(y[:, ::-1], t)
    np.testing.assert_allclose(rr.slope, -r.slope, rtol=1e-6)
    np.testing.assert_allclose(rr.low, -r.high, rtol=1e-6)
    # NaN positions keep their time: same as the compacted series with its own times
    for k in range(0, 40, 9):
        ok = ~np.isnan(y[k])
        one = sen_slope(y[k][ok], t[ok])
        assert (one.slope, one.low, one.high) == (r.slope[k], r.low[k], r.high[k])
    # 3-d equals one by one
    y3 = y.reshape(4, 10, 18)
    r3 = sen_slope(y3, t)
    np.testing.assert_array_equal(r3.slope.reshape(-1), r.slope)
    with pytest.raises(InputError, match="confidence level"):
        sen_slope(y, t, confidence=0.05)


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


# ---------------------------------------------------------------------------------------------
# Pettitt
# ---------------------------------------------------------------------------------------------
def _pettitt_reference(x):
    # slow obvious implementation of Pettitt (1979): U_t by the double sum, first argmax
    n = x.size
    u = [sum(np.sign(x[i] - x[j]) for i in range(t) for j in range(t, n)) for t in range(1, n)]
    k = max(abs(v) for v in u)
    t = int(np.argmax(np.abs(u)))  # index of the last value before the change
    return k, t, min(1.0, 2 * math.exp(-6 * k**2 / (n**3 + n**2)))


def test_pettitt_step_checks_md():
    # CHECKS.md (computed): ten values then ten higher -> K = 100 at t = 10 (index 9), p ~ 0.00158
    r = pettitt(np.r_[np.full(10, 0.2), np.full(10, 0.5)])
    assert r.k == 100
    assert r.index == 9
    assert r.p_value == pytest.approx(0.00158, abs=5e-6)


def test_pettitt_matches_reference_with_nans_on_original_axis():
    rng = np.random.default_rng(8)
    y = _series_with_ties_and_nans(rng, 120, 22, min_valid=3)
    y[:, 11:] += rng.normal(0, 1.5, (120, 1))  # some steps
    res = pettitt(y)
    for r in range(120):
        ok = np.flatnonzero(~np.isnan(y[r]))
        k, t, p = _pettitt_reference(y[r, ok])
        assert res.k[r] == k
        assert res.p_value[r] == pytest.approx(p, rel=1e-12)
        if k > 0:
            assert res.index[r] == ok[t]  # position on the ORIGINAL time axis
    assert np.isnan(pettitt(np.ones(6)).index)  # K = 0: no change point (documented)
    assert np.isnan(pettitt([1.0, np.nan, 2.0]).k)


# ---------------------------------------------------------------------------------------------
# FDR
# ---------------------------------------------------------------------------------------------
BH_P = np.array([0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240,
                 0.4262, 0.5719, 0.6528, 0.7590, 1.000])


def test_fdr_benjamini_hochberg_1995_example():
    # Benjamini & Hochberg (1995) worked example (CHECKS.md): BH rejects 4 at q = 0.05
    reject, adj = fdr(BH_P, 0.05)
    assert reject.sum() == 4 and reject[:4].all()
    expected = [0.0015, 0.003, 0.0095, 0.035625, 0.0603, 0.063857, 0.063857, 0.0645, 0.0765,
                0.486, 0.581182, 0.714875, 0.753231, 0.813214, 1]
    np.testing.assert_allclose(adj, expected, atol=1e-6)


@pytest.mark.parametrize("method", ["bh", "by"])
def test_fdr_matches_scipy_and_statsmodels(method):
    # scipy.stats.false_discovery_control (adjusted) and statsmodels multipletests (reject) on the
    # valid values of a 3-d map with NaN
    rng = np.random.default_rng(9)
    for _ in range(20):
        p = rng.uniform(size=(3, 7, 9)) ** rng.uniform(1, 6)
        p[rng.random(p.shape) < 0.2] = np.nan
        q = rng.uniform(0.01, 0.2)
        reject, adj = fdr(p, q, method=method)
        ok = ~np.isnan(p)
        np.testing.assert_allclose(adj[ok], stats.false_discovery_control(p[ok], method=method),
                                   rtol=1e-12)
        sm = multipletests(p[ok], alpha=q, method="fdr_bh" if method == "bh" else "fdr_by")
        np.testing.assert_array_equal(reject[ok], sm[0])
        assert not reject[~ok].any() and np.isnan(adj[~ok]).all()


def test_fdr_bad_arguments():
    with pytest.raises(InputError, match="q"):
        fdr(BH_P, q=5)
    with pytest.raises(InputError, match="p-values"):
        fdr([0.5, 1.5])
    with pytest.raises(UnknownNameError, match="bh"):
        fdr(BH_P, method="bonferroni")


def test_package_exports_functions_not_their_modules():
    # unmix.trend is a package whose method modules share their function's name: the package
    # namespace must hold the functions (re-exported in __init__), as the flat module did
    import types

    import unmix.trend as trend

    for name in trend.__all__:
        assert not isinstance(getattr(trend, name), types.ModuleType), name
    assert trend.mann_kendall is mann_kendall and trend.fdr is fdr
