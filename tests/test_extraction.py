"""Tests of unmix.extraction: endmember count, VCA / N-FINDR / ATGP / PPI, matching.

Stack sampling (unmix.cube.extraction) is tested in tests/test_cube_extraction.py.

Synthetic scenes: linear mixtures with Dirichlet(1, ..., 1) abundances (uniform on the simplex) of
either random smooth spectra made here or spectra of the shipped demo library, one pure pixel per
endmember placed at a random row, plus white Gaussian noise at a given SNR,
SNR = 10 log10(E|x|^2 / E|n|^2) (the definition used in the VCA and HySime papers).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, stats

from unmix import extraction as ex
from unmix.errors import BandMismatchError, InputError, RankError, ShapeError, UnknownNameError
from unmix.extraction.ppi import _merge_candidates
from unmix.io.library import read_shipped_library

# ------------------------------------------------------------------------------------------------
# data made in the tests
# ------------------------------------------------------------------------------------------------


def smooth_spectra(n: int, n_bands: int, rng: np.random.Generator) -> np.ndarray:
    """Random smooth reflectance spectra: an offset plus four Gaussian bumps, clipped to 0.01..0.95."""
    wl = np.linspace(0.0, 1.0, n_bands)
    out = np.empty((n, n_bands))
    for i in range(n):
        s = np.full(n_bands, rng.uniform(0.05, 0.3))
        for _ in range(4):
            s += rng.uniform(0, 0.3) * np.exp(-((wl - rng.uniform(0, 1)) ** 2) / (2 * rng.uniform(0.05, 0.3) ** 2))
        out[i] = s
    return np.clip(out, 0.01, 0.95)


def mixed_scene(em: np.ndarray, n: int, snr_db: float, rng: np.random.Generator):
    """(pixels float32, abundances, rows of the pure pixels)."""
    p = em.shape[0]
    a = rng.dirichlet(np.ones(p), n)
    pure_rows = rng.choice(n, size=p, replace=False)
    a[pure_rows] = np.eye(p)
    x = a @ em
    sigma = np.sqrt(np.mean(x**2) / 10 ** (snr_db / 10))
    return (x + rng.normal(0.0, sigma, x.shape)).astype(np.float32), a, pure_rows


def angles_deg(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    cos = a @ b.T / np.outer(np.linalg.norm(a, axis=1), np.linalg.norm(b, axis=1))
    return np.degrees(np.arccos(np.clip(cos, -1, 1)))


def mean_matched_angle(est: np.ndarray, truth: np.ndarray) -> float:
    """Mean spectral angle after optimal one-to-one matching (scipy's Hungarian solver)."""
    ang = angles_deg(est, truth)
    r, c = optimize.linear_sum_assignment(ang)
    return float(ang[r, c].mean())


@pytest.fixture(scope="module")
def demo():
    return read_shipped_library("demo_library")


@pytest.fixture(scope="module")
def demo_s2():
    return read_shipped_library("demo_library_sentinel-2a-msi")


BRIGHT4 = ["green_vegetation", "dry_vegetation", "bright_soil", "sand"]
FIVE = ["green_vegetation", "dry_vegetation", "dark_soil", "sand", "water"]

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


# ------------------------------------------------------------------------------------------------
# PPI
# ------------------------------------------------------------------------------------------------


def test_ppi_counts_hand_case():
    # Boardman et al. 1995: each skewer scores its largest and smallest projection.
    # Points A(0.1,0.2) B(2,0) C(0,3) D(0.8,0.8) E(1,1.2); skewers
    #  (1,0):  0.1, 2, 0, 0.8, 1.0          -> max B, min C
    #  (0,1):  0.2, 0, 3, 0.8, 1.2          -> max C, min B
    #  (1,1):  0.3, 2, 3, 1.6, 2.2          -> max C, min A
    #  (1,-1): -0.1, 2, -3, 0, -0.2         -> max B, min C
    # hits A 1, B 3, C 4, D 0, E 0 (sum 8 = 2 x 4 skewers)
    pts = np.array([[0.1, 0.2], [2, 0], [0, 3], [0.8, 0.8], [1.0, 1.2]])
    sk = np.array([[1, 0], [0, 1], [1, 1], [1, -1]], dtype=float) / np.array([[1], [1], [np.sqrt(2)], [np.sqrt(2)]])
    assert ex.ppi_counts(pts, sk).tolist() == [1, 3, 4, 0, 0]
    pts_nan = np.vstack([pts, [[np.nan, 9.0]]])
    assert ex.ppi_counts(pts_nan, sk).tolist() == [1, 3, 4, 0, 0, 0]


def test_ppi_counts_blocking_matches_dense():
    # Same counts whatever the internal block size: dense reference with numpy argmax/argmin.
    rng = np.random.default_rng(0)
    z = rng.normal(size=(30_000, 3))
    sk = rng.normal(size=(700, 3))
    proj = z @ sk.T
    ref = np.bincount(proj.argmax(0), minlength=z.shape[0]) + np.bincount(proj.argmin(0), minlength=z.shape[0])
    np.testing.assert_array_equal(ex.ppi_counts(z, sk), ref)


def test_ppi_merge_hand_case():
    # Merging rule (ppi docstring), by hand: candidates sorted by hits 10, 7, 5, 2 with spectra
    # (1,0), (1,0.01), (0,1), (0.01,1). Angle (1,0)-(1,0.01) = atan(0.01) = 0.573° <= 3° -> merged
    # (17 hits); (0,1) is 90° away -> new group; (0.01,1) 0.573° from (0,1) -> merged (7 hits).
    reps, totals = _merge_candidates(
        np.array([[1, 0], [1, 0.01], [0, 1], [0.01, 1]]), np.array([10, 7, 5, 2]), np.deg2rad(3.0)
    )
    assert reps.tolist() == [0, 2] and totals.tolist() == [17, 7]


def test_ppi_merges_near_duplicates():
    # Boardman et al. 1995 with merging: three vertices, each present twice 0.3° apart. Along every
    # skewer the extremes are vertex copies, so after merging at 3° the three groups are the three
    # vertices, one pixel each.
    rng = np.random.default_rng(1)
    em = smooth_spectra(3, 20, rng)
    twins = em * (1 + 0.005 * np.sin(np.arange(20)))[None, :]
    assert angles_deg(em, twins).diagonal().max() < 1.0
    a = rng.dirichlet(np.ones(3), 500)
    x = np.vstack([em, twins, a @ em])
    _, idx = ex.ppi(x, 3, seed=0, merge_angle_deg=3.0)
    groups = sorted(int(i) % 3 for i in idx if i < 6)
    assert len(idx) == 3 and groups == [0, 1, 2]
    with pytest.raises(InputError, match="merge_angle_deg"):
        ex.ppi(np.vstack([em, a @ em]), 3, merge_angle_deg=89.0)


# ------------------------------------------------------------------------------------------------
# library matching
# ------------------------------------------------------------------------------------------------


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 100_000), n=st.integers(1, 5), m=st.integers(1, 5))
def test_match_library_is_optimal_assignment(seed, n, m):
    # Kuhn 1955 (assignment problem): the one-to-one matching minimises the total spectral angle;
    # reference: every injective assignment enumerated with itertools.
    rng = np.random.default_rng(seed)
    s = rng.uniform(0.05, 0.6, (n, 6))
    lib = rng.uniform(0.05, 0.6, (m, 6))
    res = ex.match_library(s, lib, [f"L{j}" for j in range(m)], max_angle_deg=180)
    ang = angles_deg(s, lib)
    k = min(n, m)
    if n <= m:
        best = min(sum(ang[i, perm[i]] for i in range(n)) for perm in itertools.permutations(range(m), n))
    else:
        best = min(sum(ang[perm[j], j] for j in range(m)) for perm in itertools.permutations(range(n), m))
    assigned = res.matched
    assert assigned.sum() == k
    assert ang[np.flatnonzero(assigned), res.library_index[assigned]].sum() == pytest.approx(best, abs=1e-9)
    assert len(set(res.library_index[assigned].tolist())) == k


def test_match_library_threshold_and_names(demo):
    # Spectral angle (Kruse et al. 1993): a spectrum far from every entry is flagged, not named.
    lib = demo.select(BRIGHT4)
    rng = np.random.default_rng(0)
    noisy = lib.spectra[[2, 0]] * (1 + rng.normal(0, 0.01, (2, lib.spectra.shape[1])))
    odd = np.linspace(0.9, 0.05, lib.spectra.shape[1])[None, :]  # decreasing ramp: unlike all
    res = ex.match_library(np.vstack([noisy, odd]), lib.spectra, lib.names, max_angle_deg=5)
    assert res.names[:2] == ["bright_soil", "green_vegetation"]
    assert res.names[2] is None and res.matched.tolist() == [True, True, False]
    assert res.angles_deg[2] > 5
    np.testing.assert_allclose(res.angles_deg[:2], angles_deg(noisy, lib.spectra[[2, 0]]).diagonal())


def test_match_library_errors():
    with pytest.raises(BandMismatchError, match="resample"):
        ex.match_library(np.ones((2, 5)), np.ones((3, 6)), ["a", "b", "c"])
    with pytest.raises(ShapeError):
        ex.match_library(np.ones((2, 5)), np.ones((3, 5)), ["a", "b"])


# ------------------------------------------------------------------------------------------------
# bad input
# ------------------------------------------------------------------------------------------------


def test_bad_input():
    x = np.random.default_rng(0).uniform(0, 1, (100, 5))
    with pytest.raises(RankError, match="at most 5"):
        ex.extract(x, 6)
    with pytest.raises(InputError, match="at least 2"):
        ex.extract(x, 1)
    with pytest.raises(UnknownNameError, match="vca"):
        ex.extract(x, 3, method="simplex")
    with pytest.raises(UnknownNameError, match="hysime"):
        ex.estimate_count(x, method="guess")
    with pytest.raises(ShapeError, match="2-D"):
        ex.extract(x[0], 2)
    with pytest.raises(InputError, match="no pixel without NaN"):
        ex.extract(np.full((10, 5), np.nan), 2)
    with pytest.raises(InputError, match="n_restarts|see help"):
        ex.extract(x, 3, method="vca", n_restarts=3)
    with pytest.raises(InputError, match="false_alarm"):
        ex.hfc(x, false_alarm=0.7)


def test_kernel_package_imports_no_upper_layer():
    # House rule (DEVELOPERS.md, layers): a kernel package imports no xarray/dask/rasterio/click/matplotlib.
    import subprocess
    import sys

    code = (
        "import sys, unmix.extraction, unmix.extraction.count, unmix.extraction.matching; "
        "bad = sorted(m for m in ('xarray', 'dask', 'rasterio', 'click', 'matplotlib') if m in sys.modules); "
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_public_names_stay_importable_from_the_package():
    # The package split (one topic module per method) keeps every public name at its old place.
    import importlib

    pkg = importlib.import_module("unmix.extraction")
    for name in pkg.__all__:
        obj = getattr(pkg, name)
        home = obj.__module__
        assert home == pkg.__name__ or home.startswith(pkg.__name__ + ".")
        assert getattr(importlib.import_module(home), name) is obj
    assert not hasattr(pkg, "sample_stack")  # cube-layer work: unmix.cube.extraction
