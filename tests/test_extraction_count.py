"""Tests of unmix.extraction.count: endmember count (HySime, HFC).

Synthetic scenes: linear mixtures with Dirichlet(1, ..., 1) abundances (uniform on the simplex) of
either random smooth spectra made in the tests or spectra of the shipped demo library, one pure pixel
per endmember placed at a random row, plus white Gaussian noise at a given SNR,
SNR = 10 log10(E|x|^2 / E|n|^2) (the definition used in the VCA and HySime papers); shared generators
in tests/_extraction_helpers.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from _extraction_helpers import (
    BRIGHT4,
    FIVE,
    demo_fixture,  # noqa: F401  (registers the "demo" fixture)
    demo_s2_fixture,  # noqa: F401  (registers the "demo_s2" fixture)
    mixed_scene,
    smooth_spectra,
)
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from unmix import extraction as ex

# ------------------------------------------------------------------------------------------------
# reference implementations written out slowly, straight from the papers
# ------------------------------------------------------------------------------------------------


def hysime_reference(y: np.ndarray) -> int:
    """HySime as in Bioucas-Dias & Nascimento (2008), with an explicit least-squares regression of
    each band on all the others (normal equations solved by numpy), in the paper's column
    convention (bands x pixels)."""
    y = np.asarray(y, dtype=np.float64).T
    n_bands, n = y.shape
    w = np.empty_like(y)
    for i in range(n_bands):
        others = np.delete(np.arange(n_bands), i)
        z = y[others]
        beta = np.linalg.solve(z @ z.T, z @ y[i])
        w[i] = y[i] - beta @ y[others]
    rn = np.diag(np.diag(w @ w.T / n))
    x = y - w
    ry = y @ y.T / n
    rx = x @ x.T / n
    rn = rn + np.trace(rx) / n_bands * 1e-5 * np.eye(n_bands)
    vals, e = np.linalg.eigh(rx)
    e = e[:, np.argsort(vals)[::-1]]
    py = np.diag(e.T @ ry @ e)
    pn = np.diag(e.T @ rn @ e)
    return int(np.sum(-py + 2 * pn < 0))


def hfc_reference(y: np.ndarray, pf: float) -> int:
    """HFC of Chang & Du (2004): correlation vs covariance eigenvalues, Neyman-Pearson threshold with
    var ≈ 2(λ² + λ̂²)/N; covariance from numpy.cov, threshold from scipy.stats.norm.ppf."""
    y = np.asarray(y, dtype=np.float64)
    n = y.shape[0]
    lam = np.sort(np.linalg.eigvalsh(y.T @ y / n))[::-1]
    lam_hat = np.sort(np.linalg.eigvalsh(np.cov(y.T, bias=True)))[::-1]
    thr = stats.norm.ppf(1 - pf) * np.sqrt(2 * (lam**2 + lam_hat**2) / n)
    return int(np.sum(lam - lam_hat > thr))


# ------------------------------------------------------------------------------------------------
# endmember count
# ------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("p", [3, 5])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_hysime_exact_at_40db_hyperspectral_random(p, seed):
    # Bioucas-Dias & Nascimento 2008 (TGRS 46(8)): HySime recovers the subspace dimension exactly on
    # simulated data at high SNR; 120 bands, 40 dB.
    rng = np.random.default_rng(seed)
    x, _, _ = mixed_scene(smooth_spectra(p, 120, rng), 5000, 40, rng)
    assert ex.estimate_count(x, method="hysime") == p


@pytest.mark.parametrize("names", [BRIGHT4, FIVE])
def test_hysime_exact_at_40db_demo_library(demo, names):
    # Bioucas-Dias & Nascimento 2008; 421-band shipped spectra, 40 dB.
    rng = np.random.default_rng(7)
    x, _, _ = mixed_scene(demo.select(names).spectra, 5000, 40, rng)
    assert ex.estimate_count(x) == len(names)


@pytest.mark.parametrize("method", ["hysime", "hfc"])
@pytest.mark.parametrize("p", [3, 5])
def test_count_within_one_multispectral(method, p):
    # Chang & Du 2004 / Bioucas-Dias & Nascimento 2008: on 10 bands the estimate is expected near the
    # truth (brief's tolerance: within one).
    rng = np.random.default_rng(11 + p)
    x, _, _ = mixed_scene(smooth_spectra(p, 10, rng), 5000, 40, rng)
    assert abs(ex.estimate_count(x, method=method) - p) <= 1


@pytest.mark.parametrize("names", [BRIGHT4, FIVE])
def test_hysime_within_one_sentinel2_demo(demo_s2, names):
    # Bioucas-Dias & Nascimento 2008; shipped library resampled to 10 Sentinel-2 bands, 40 dB.
    rng = np.random.default_rng(3)
    x, _, _ = mixed_scene(demo_s2.select(names).spectra, 5000, 40, rng)
    assert abs(ex.estimate_count(x, method="hysime") - len(names)) <= 1


def test_hysime_within_one_at_30db(demo):
    # Bioucas-Dias & Nascimento 2008: at lower SNR the weakest directions may drop out; within one.
    rng = np.random.default_rng(5)
    x, _, _ = mixed_scene(demo.select(FIVE).spectra, 5000, 30, rng)
    assert abs(ex.estimate_count(x) - 5) <= 1


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 10_000), p=st.integers(2, 6), snr=st.sampled_from([25.0, 30.0, 40.0]))
def test_hysime_matches_slow_reference(seed, p, snr):
    # Bioucas-Dias & Nascimento 2008, eqs. for the multiple-regression noise estimate and the
    # minimum-error criterion; reference regresses each band explicitly (normal equations).
    rng = np.random.default_rng(seed)
    x, _, _ = mixed_scene(smooth_spectra(p, 30, rng), 800, snr, rng)
    assert ex.hysime(x, sample=None) == hysime_reference(x)


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 10_000), p=st.integers(2, 6), pf=st.sampled_from([1e-1, 1e-3, 1e-5]))
def test_hfc_matches_slow_reference(seed, p, pf):
    # Chang & Du 2004 (TGRS 42(3)) HFC eigen-threshold test; reference with numpy.cov and scipy.stats.
    rng = np.random.default_rng(seed)
    x, _, _ = mixed_scene(smooth_spectra(p, 30, rng), 800, 35.0, rng)
    assert ex.hfc(x, false_alarm=pf, sample=None) == max(1, hfc_reference(x, pf))


def test_count_ignores_nan_rows_and_samples_deterministically():
    # NaN rows are no data (DEVELOPERS.md): the estimate must equal the one on the clean rows.
    rng = np.random.default_rng(2)
    x, _, _ = mixed_scene(smooth_spectra(4, 60, rng), 3000, 40, rng)
    xn = x.copy()
    xn[::7, 3] = np.nan
    clean = x[np.isfinite(xn).all(axis=1)]
    assert ex.estimate_count(xn, sample=None) == ex.estimate_count(clean, sample=None)
    assert ex.estimate_count(xn, sample=1000, seed=4) == ex.estimate_count(xn, sample=1000, seed=4)
