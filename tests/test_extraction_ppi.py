"""Tests of unmix.extraction.ppi: pixel purity index counts and merging of near-duplicate candidates."""

from __future__ import annotations

import numpy as np
import pytest
from _extraction_helpers import angles_deg, smooth_spectra

from unmix import extraction as ex
from unmix.errors import InputError
from unmix.extraction.ppi import _merge_candidates

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
