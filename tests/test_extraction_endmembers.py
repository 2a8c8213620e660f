"""Tests of unmix.extraction endmember extraction (VCA, N-FINDR, ATGP, PPI): accuracy and behaviour.

Stack sampling (unmix.cube.extraction) is tested in tests/test_cube_extraction.py.

Synthetic scenes: linear mixtures with Dirichlet(1, ..., 1) abundances (uniform on the simplex) of
either random smooth spectra made in the tests or spectra of the shipped demo library, one pure pixel
per endmember placed at a random row, plus white Gaussian noise at a given SNR,
SNR = 10 log10(E|x|^2 / E|n|^2) (the definition used in the VCA and HySime papers); shared generators
in tests/_extraction_helpers.py.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from _extraction_helpers import (
    BRIGHT4,
    angles_deg,
    demo_fixture,  # noqa: F401  (registers the "demo" fixture)
    mean_matched_angle,
    mixed_scene,
    smooth_spectra,
)
from scipy import optimize

from unmix import extraction as ex


def atgp_reference(y: np.ndarray, p: int) -> list[int]:
    """ATGP of Ren & Chang (2003) with the explicit orthogonal projector P = I - U U^+ each step."""
    y = np.asarray(y, dtype=np.float64)
    chosen = [int(np.argmax(np.sum(y * y, axis=1)))]
    for _ in range(1, p):
        u = y[chosen].T
        proj = np.eye(y.shape[1]) - u @ np.linalg.pinv(u)
        r = y @ proj.T
        chosen.append(int(np.argmax(np.sum(r * r, axis=1))))
    return chosen


def simplex_volume(points: np.ndarray) -> float:
    """Volume of the simplex spanned by the rows of ``points``, from the Gram determinant of its edge
    vectors (valid in any ambient dimension): V = sqrt(det(DᵀD)) / (p-1)!."""
    d = (points[1:] - points[0]).T
    return float(np.sqrt(max(np.linalg.det(d.T @ d), 0.0)))


# ------------------------------------------------------------------------------------------------
# extraction accuracy
# ------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("method", ["vca", "nfindr", "atgp", "ppi"])
def test_extraction_within_1p5_degrees_at_40db_random(method):
    # Nascimento & Bioucas-Dias 2005 (VCA), Winter 1999 (N-FINDR), Ren & Chang 2003 (ATGP),
    # Boardman et al. 1995 (PPI): with pure pixels present and 40 dB SNR the extracted pixels are the
    # noisy pure pixels; brief's tolerance 1.5 degrees mean angle after optimal matching.
    rng = np.random.default_rng(21)
    em = smooth_spectra(5, 120, rng)
    x, _, _ = mixed_scene(em, 8000, 40, rng)
    spectra, _ = ex.extract(x, 5, method=method, seed=3)
    assert mean_matched_angle(spectra, em) < 1.5


@pytest.mark.parametrize("method", ["vca", "nfindr", "atgp", "ppi"])
def test_extraction_within_1p5_degrees_at_40db_demo(demo, method):
    # as above on the shipped 421-band spectra
    em = demo.select(BRIGHT4).spectra
    rng = np.random.default_rng(8)
    x, _, _ = mixed_scene(em, 8000, 40, rng)
    spectra, _ = ex.extract(x, 4, method=method, seed=1)
    assert mean_matched_angle(spectra, em) < 1.5


@pytest.mark.parametrize("method", ["vca", "nfindr", "atgp", "ppi"])
def test_extraction_at_30db_finds_every_endmember(demo, method):
    # Nascimento & Bioucas-Dias 2005, fig. on SNR: at 30 dB the error grows with the noise but each
    # endmember is still found: every true endmember is the nearest of one extracted spectrum, and
    # each extracted spectrum is within 5 degrees (common practice tolerance) of its match.
    em = demo.select(BRIGHT4).spectra
    rng = np.random.default_rng(9)
    x, _, _ = mixed_scene(em, 8000, 30, rng)
    spectra, _ = ex.extract(x, 4, method=method, seed=2)
    ang = angles_deg(spectra, em)
    r, c = optimize.linear_sum_assignment(ang)
    assert ang[r, c].max() < 5.0
    assert sorted(np.argmin(ang, axis=1).tolist()) == [0, 1, 2, 3]


@pytest.mark.parametrize("method", ["vca", "nfindr", "atgp", "ppi"])
def test_noise_free_pure_pixels_are_found_exactly(method):
    # Definition shared by all four methods: without noise the simplex vertices are the pure pixels.
    rng = np.random.default_rng(4)
    em = smooth_spectra(4, 40, rng)
    x, _, pure = mixed_scene(em, 3000, np.inf, rng)
    _, idx = ex.extract(x, 4, method=method, seed=0)
    assert sorted(idx.tolist()) == sorted(pure.tolist())


@pytest.mark.parametrize("method", ["vca", "nfindr", "atgp", "ppi"])
def test_indices_point_at_spectra_and_skip_nan(method):
    # Contract (brief): spectra are rows of the ORIGINAL array, indices those rows; NaN rows never chosen.
    rng = np.random.default_rng(6)
    em = smooth_spectra(4, 30, rng)
    x, _, _ = mixed_scene(em, 4000, 40, rng)
    x[rng.choice(4000, 400, replace=False), rng.integers(0, 30)] = np.nan
    for sample in (None, 1500):
        spectra, idx = ex.extract(x, 4, method=method, seed=5, sample=sample)
        assert spectra.dtype == np.float32 and spectra.shape == (4, 30)
        assert idx.dtype == np.int64
        np.testing.assert_array_equal(x[idx], spectra)
        assert np.isfinite(spectra).all()
        assert len(set(idx.tolist())) == 4


@pytest.mark.parametrize("method", ["vca", "nfindr", "atgp", "ppi"])
def test_same_seed_same_result(method):
    # Determinism for a seed (brief).
    rng = np.random.default_rng(12)
    x, _, _ = mixed_scene(smooth_spectra(5, 50, rng), 5000, 30, rng)
    a = ex.extract(x, 5, method=method, seed=9, sample=3000)
    b = ex.extract(x.copy(), 5, method=method, seed=9, sample=3000)
    np.testing.assert_array_equal(a[1], b[1])
    np.testing.assert_array_equal(a[0], b[0])


def test_float64_stays_float64():
    rng = np.random.default_rng(1)
    x, _, _ = mixed_scene(smooth_spectra(3, 20, rng), 500, 40, rng)
    spectra, _ = ex.vca(x.astype(np.float64), 3)
    assert spectra.dtype == np.float64


@pytest.mark.parametrize("seed", range(6))
def test_atgp_matches_explicit_projector(seed):
    # Ren & Chang 2003, ATGP with P = I - U(UᵀU)⁻¹Uᵀ written out (numpy pinv); random data.
    rng = np.random.default_rng(seed)
    y = rng.uniform(0.0, 1.0, (400, 12))
    _, idx = ex.atgp(y, 6)
    assert idx.tolist() == atgp_reference(y, 6)


def test_atgp_hand_case():
    # Hand computation (Ren & Chang 2003): norms² of (0.1,0.1),(0.5,0.1),(0.1,0.4),(0.3,0.25) are
    # 0.02, 0.26, 0.17, 0.1525 -> first target row 1 = (0.5,0.1). Orthogonal complement of (0.5,0.1)
    # is spanned by (-0.1,0.5)/|.|; squared projections: row0 (−0.01+0.05)²/0.26 = 0.00615,
    # row2 (−0.01+0.2)²/0.26 = 0.1388, row3 (−0.03+0.125)²/0.26 = 0.0347 -> second target row 2.
    x = np.array([[0.1, 0.1], [0.5, 0.1], [0.1, 0.4], [0.3, 0.25]])
    assert ex.atgp(x, 2)[1].tolist() == [1, 2]


@pytest.mark.parametrize("seed", range(4))
def test_nfindr_finds_largest_simplex_by_brute_force(seed):
    # Winter 1999: N-FINDR returns the pixels spanning the largest simplex. Reference: every triple
    # (quadruple) of a small noise-free scene, volume from the Gram determinant of the edge vectors.
    rng = np.random.default_rng(seed)
    p = 3 + seed % 2
    em = smooth_spectra(p, 15, rng)
    a = rng.dirichlet(np.ones(p) * 0.7, 18)
    a[:p] = np.eye(p) * 0.9 + 0.1 / p  # near-pure, not pure: the largest simplex is not obvious
    x = a @ em
    best = max(itertools.combinations(range(x.shape[0]), p), key=lambda c: simplex_volume(x[list(c)]))
    _, idx = ex.nfindr(x, p, seed=seed, n_restarts=5)
    assert simplex_volume(x[idx]) == pytest.approx(simplex_volume(x[list(best)]), rel=1e-9)


def test_vca_snr_branches_both_find_pure_pixels():
    # Nascimento & Bioucas-Dias 2005: projection chosen by SNR against 15 + 10 log10(p) dB; forcing
    # either branch on noise-free data must still return the pure pixels.
    rng = np.random.default_rng(3)
    em = smooth_spectra(4, 25, rng)
    x, _, pure = mixed_scene(em, 2000, np.inf, rng)
    for snr in (5.0, 60.0):
        _, idx = ex.vca(x, 4, snr_db=snr, seed=1)
        assert sorted(idx.tolist()) == sorted(pure.tolist())
