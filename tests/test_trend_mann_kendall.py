"""Tests of unmix.trend.mann_kendall: the Mann-Kendall trend test and its autocorrelation corrections.

References used: the worked examples in ../shared/CHECKS.md; pymannkendall (original /
pre-whitening / trend-free pre-whitening / Hamed-Rao tests); scipy.stats.kendalltau (exact and
normal p-values); exact null distributions by enumeration below; shared series generators in
tests/_trend_helpers.py.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pymannkendall as pmk
import pytest
from _trend_helpers import HOLY_CROSS, _ar1, _series_with_ties_and_nans
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from unmix.errors import InputError, ShapeError, UnknownNameError
from unmix.trend import DEFAULT_CORRECTION, MannKendallCorrection, mann_kendall, sen_slope

PMK = {
    "none": pmk.original_test,
    "prewhiten": pmk.pre_whitening_modification_test,
    "trend-free-prewhiten": pmk.trend_free_pre_whitening_modification_test,
    "hamed-rao": pmk.hamed_rao_modification_test,
}
_PMK_ACF = getattr(pmk.pymannkendall, "__acf")


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


# ---------------------------------------------------------------- long series in bounded memory
_LONG_SERIES_CHILD = r"""
import resource, sys
import numpy as np
from scipy import stats
limit = int(sys.argv[1])
resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
from unmix.trend import mann_kendall
n = int(sys.argv[2])
x = np.random.default_rng(7).standard_normal(n) + 2e-5 * np.arange(n)
r = mann_kendall(x, correction=sys.argv[3])
# scipy.stats.kendalltau (O(n log n)) gives tau-b = tau-a without ties: S = tau n (n - 1) / 2
s_ref = stats.kendalltau(np.arange(n), x).statistic * n * (n - 1) / 2
print(float(r.s), float(s_ref), float(r.var_s), n * (n - 1) * (2 * n + 5) / 18)
"""


@pytest.mark.parametrize("correction", ["none", "prewhiten"])
def test_mann_kendall_long_series_in_bounded_memory(correction):
    # 40,000 values: pairwise-slope scratch would be 2 x 6.4 GB; the child may map 4 GiB in all.
    # The original test and plain pre-whitening need no pairwise slopes (O(n) memory).
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-c", _LONG_SERIES_CHILD, str(4 * 2**30), "40000", correction],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    s, s_ref, var, var_ref = map(float, done.stdout.split())
    if correction == "none":
        # S against scipy's O(n log n) Kendall tau; Var(S) without ties (Kendall 1975, Gilbert 1987)
        assert s == pytest.approx(s_ref, abs=0.5)
        assert var == pytest.approx(var_ref, rel=1e-12)
    else:
        # pre-whitened series has n - 1 values (von Storch 1995): Var(S) of n - 1 values
        m = 40_000 - 1
        assert var == pytest.approx(m * (m - 1) * (2 * m + 5) / 18, rel=1e-12)


@pytest.mark.parametrize("correction", ["trend-free-prewhiten", "hamed-rao", "iterative-prewhiten"])
def test_mann_kendall_refuses_series_too_long_for_pairwise_slopes(correction):
    # these corrections detrend with the Sen slope (n (n - 1) / 2 pairwise slopes): refused with a
    # clear message before any allocation, instead of a MemoryError
    from unmix.errors import SeriesTooLongError
    from unmix.trend._arguments import MAX_PAIRWISE_LENGTH

    y = np.zeros(200_000)
    with pytest.raises(SeriesTooLongError, match=f"limit is {MAX_PAIRWISE_LENGTH} steps"):
        mann_kendall(y, correction=correction)
    with pytest.raises(SeriesTooLongError, match="Sen slope"):
        sen_slope(y)
    # at the limit the same call works (checked on a short batch)
    r = mann_kendall(np.arange(MAX_PAIRWISE_LENGTH, dtype=float)[None, :] % 97, correction=correction)
    assert np.isfinite(r.s).all()
