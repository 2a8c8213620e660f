"""Tests of unmix.extraction.matching: matching extracted spectra to a library by spectral angle."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from _extraction_helpers import (
    BRIGHT4,
    angles_deg,
    demo_fixture,  # noqa: F401  (registers the "demo" fixture)
)
from hypothesis import given, settings
from hypothesis import strategies as st

from unmix import extraction as ex
from unmix.errors import BandMismatchError, ShapeError

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
