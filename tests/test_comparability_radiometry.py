"""IR-MAD invariant pixels and orthogonal regression (unmix.comparability.radiometry)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import linalg, stats

from unmix.comparability import fit_date, fit_flag, irmad, normalise, orthogonal_regression


def _pair(n=20000, p=6, changed=1 / 3, noise=0.001, seed=0):
    rng = np.random.default_rng(seed)
    date = rng.random((n, p)) * 0.4
    ref = 1.1 * date + 0.02 + rng.normal(0, noise, date.shape)
    moved = rng.random(n) < changed
    ref[moved] += rng.normal(0, 0.08, (moved.sum(), p))  # real change on a third of the pixels
    return date, ref, moved


def test_gain_offset_recovered_within_one_percent_with_a_third_changed():
    date, ref, _ = _pair()
    fit = fit_date(date, ref)
    # generated gain 1.1 and offset 0.02 (the test; procedure of Canty & Nielsen 2008)
    np.testing.assert_allclose(fit.gain, 1.1, rtol=0.01)
    np.testing.assert_allclose(fit.offset, 0.02, rtol=0.01)
    assert fit.n >= 50
    assert "gain departs from 1" in fit.flag  # 1.1 is beyond the default tolerance of 0.05
    # the plain fit on all pixels is pulled off by the changed ones (why invariant pixels are needed)
    plain = np.array([orthogonal_regression(date[:, k], ref[:, k])[1] for k in range(6)])
    assert np.abs(plain / 0.02 - 1).max() > 0.01


def test_irmad_no_change_probability_separates_changed_pixels():
    date, ref, moved = _pair(n=5000, p=4, seed=1)
    res = irmad(date, ref)
    # Nielsen 2007: changed pixels have large chi-square, no-change probability near 0
    assert np.median(res.no_change[moved]) < 1e-6
    assert np.median(res.no_change[~moved]) > 0.05
    assert (res.no_change[~moved] > 0.95).sum() > 20 * (res.no_change[moved] > 0.95).sum()
    assert res.mad.shape == date.shape and res.iterations >= 2 and res.converged
    # the no-change probability is the chi-square survival function with n_bands degrees of freedom
    np.testing.assert_allclose(res.no_change, stats.chi2.sf(res.chi2, 4), rtol=1e-10, atol=1e-300)  # scipy.stats
    assert not irmad(date, ref, max_iter=1).converged  # one pass cannot show the correlations settled


def test_first_iteration_canonical_correlations_match_whitened_svd():
    rng = np.random.default_rng(2)
    x = rng.normal(size=(3000, 3))
    y = x @ rng.normal(size=(3, 3)) + rng.normal(size=(3000, 3))
    res = irmad(x, y, max_iter=1)
    # Hotelling (1936): canonical correlations are the singular values of S11^-1/2 S12 S22^-1/2
    s = np.cov(np.hstack([x, y]).T, bias=True)
    w1 = linalg.inv(linalg.sqrtm(s[:3, :3]).real)
    w2 = linalg.inv(linalg.sqrtm(s[3:, 3:]).real)
    expected = np.sort(linalg.svdvals(w1 @ s[:3, 3:] @ w2))
    np.testing.assert_allclose(np.sort(res.rho), expected, rtol=1e-8)
    # the MAD variates are uncorrelated with variance 2 (1 - rho) (Nielsen 2007, eq. for var(MAD))
    np.testing.assert_allclose(np.var(res.mad, axis=0), 2 * (1 - res.rho), rtol=1e-6)


def test_orthogonal_regression_matches_scipy_odr():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # scipy.odr is deprecated from scipy 1.17
        from scipy import odr
    rng = np.random.default_rng(3)
    truth = rng.random(400)
    x = truth + rng.normal(0, 0.02, truth.size)
    y = 0.95 * truth + 0.03 + rng.normal(0, 0.02, truth.size)
    gain, offset, gain_se, offset_se, r2, n = orthogonal_regression(x, y)
    out = odr.ODR(odr.RealData(x, y), odr.unilinear, beta0=[1.0, 0.0]).run()
    # scipy.odr (ODRPACK, equal weights in x and y) solves the same total least squares problem
    assert gain == pytest.approx(out.beta[0], rel=1e-6)
    assert offset == pytest.approx(out.beta[1], abs=1e-7)
    # standard errors: Canty, Nielsen & Schmidt (2004) vs ODRPACK's linearised ones, asymptotically equal
    assert gain_se == pytest.approx(out.sd_beta[0], rel=0.1)
    assert offset_se == pytest.approx(out.sd_beta[1], rel=0.1)
    assert r2 == pytest.approx(np.corrcoef(x, y)[0, 1] ** 2, rel=1e-12)  # numpy.corrcoef
    assert n == 400


def test_flags_poor_fit_gain_and_too_few_pixels():
    assert fit_flag(np.array([1.0, 1.02]), np.array([0.99, 0.95])) == ""
    flag = fit_flag(np.array([1.0, 1.2]), np.array([0.5, 0.95]), band_names=["red", "nir"])
    assert "poor fit" in flag and "red (R2 0.50)" in flag and "nir (1.200)" in flag
    date, ref, _ = _pair(n=40, p=3)
    fit = fit_date(date, ref)
    assert np.isnan(fit.gain).all() and "too few" in fit.flag


def test_normalise_applies_gain_and_offset_per_band():
    v = np.array([[0.1, 0.2], [0.3, 0.4]], dtype=np.float32)
    out = normalise(v, np.array([1.1, 0.9]), np.array([0.02, -0.01]))
    assert out.dtype == np.float32
    np.testing.assert_allclose(out, [[0.13, 0.17], [0.35, 0.35]], rtol=1e-6)  # by hand


def test_linearly_dependent_bands_are_flagged_not_raised():
    # noise-free mixtures of 3 endmembers in 6 bands have a rank-3 covariance: IR-MAD's canonical
    # correlation has no solution (singular matrices); the date is flagged with the reason instead
    import numpy as np

    from unmix.comparability import fit_date

    rng = np.random.default_rng(3)
    M = rng.uniform(0.05, 0.5, (3, 6))
    x = rng.dirichlet(np.ones(3), 500) @ M
    y = rng.dirichlet(np.ones(3), 500) @ M
    fit = fit_date(x, y)
    assert np.isnan(fit.gain).all() and "linearly dependent" in fit.flag


def test_iterating_on_a_subset_then_scoring_all_keeps_the_invariant_pixels():
    date, ref, moved = _pair(n=20000, p=6, seed=4)
    full = irmad(date, ref)
    part = irmad(date, ref, fit_pixels=5000)
    # the canonical correlations of a 12-variable covariance from 5 000 pixels agree to about 2 %
    # (relative standard error near sqrt(2 / n); Anderson 2003, from memory)
    np.testing.assert_allclose(np.sort(part.rho), np.sort(full.rho), atol=0.02)
    keep_full, keep_part = full.no_change > 0.95, part.no_change > 0.95
    assert part.no_change.shape == (20000,)  # every pixel scored
    assert (keep_full & keep_part).sum() > 0.8 * keep_full.sum()
    assert keep_part[moved].sum() < 0.05 * keep_part.sum()  # changed pixels still left out (Nielsen 2007)
