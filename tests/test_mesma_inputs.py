"""Tests of unmix.mesma: shapes, dtypes, no data, errors and warnings.

References used below:
- Heinz & Chang (2001), IEEE TGRS 39(3):529-545, doi:10.1109/36.911111: fully constrained least
  squares fractions are non-negative and sum to one.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from _mesma_helpers import (
    candidate_models,
    hand_bundles_fixture,  # noqa: F401  (registers the "hand_bundles" fixture)
    make_bundles,
    make_scene,
)
from hypothesis import given, settings
from hypothesis import strategies as st

from unmix.errors import BandMismatchError, CollinearityWarning, InputError, RankError
from unmix.mesma import MesmaConstraint, MesmaResult, mesma

# --------------------------------------------------------------------------------------------
# shapes, dtypes, no data, errors


def test_shapes_dtypes_and_nan(hand_bundles):
    rng = np.random.default_rng(10)
    x, _, _ = make_scene(rng, hand_bundles, np.zeros(6), 24)
    x = x.reshape(2, 3, 4, 6)
    x[1, 2, 3, 4] = np.nan
    for dt in (np.float32, np.float64):
        res = mesma(x.astype(dt), hand_bundles, shade=np.zeros(6))
        assert isinstance(res, MesmaResult)
        assert res.fractions.shape == (2, 3, 4, 4) and res.fractions.dtype == dt
        assert res.rmse.shape == (2, 3, 4) and res.rmse.dtype == dt
        assert res.members.shape == (2, 3, 4, 3) and res.members.dtype == np.int16
        assert res.unmodelled.shape == (2, 3, 4) and res.unmodelled.dtype == bool
        assert res.names == ("green", "dry", "soil", "shade") and res.classes == ("green", "dry", "soil")
        # NaN input is no data: NaN out, members -1, not "unmodelled"
        assert np.all(np.isnan(res.fractions[1, 2, 3])) and np.isnan(res.rmse[1, 2, 3])
        assert np.all(res.members[1, 2, 3] == -1) and not res.unmodelled[1, 2, 3]
        flat = mesma(x.reshape(-1, 6).astype(dt), hand_bundles, shade=np.zeros(6))
        np.testing.assert_array_equal(flat.members, res.members.reshape(-1, 3))
        np.testing.assert_array_equal(flat.fractions, res.fractions.reshape(-1, 4))
    empty = mesma(np.zeros((0, 6), np.float32), hand_bundles)
    assert empty.fractions.shape == (0, 3) and empty.members.shape == (0, 3)
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.members = None


def test_errors(hand_bundles):
    x = np.full((2, 6), 0.2)
    with pytest.raises(BandMismatchError, match="'dry' has 5 bands but the reflectance has 6"):
        mesma(x, {**hand_bundles, "dry": np.ones((1, 5)) * 0.2})
    with pytest.raises(BandMismatchError, match="shade spectrum has 4 bands"):
        mesma(x, hand_bundles, shade=np.zeros(4))
    with pytest.raises(InputError, match="bundle 'soil' is empty"):
        mesma(x, {**hand_bundles, "soil": np.zeros((0, 6))})
    with pytest.raises(InputError, match="non-empty mapping"):
        mesma(x, {})
    with pytest.raises(InputError, match="'dry' holds NaN"):
        mesma(x, {**hand_bundles, "dry": np.full((1, 6), np.nan)})
    with pytest.raises(InputError, match="constraint 'nnls' is not known"):
        mesma(x, hand_bundles, constraint="nnls")
    with pytest.raises(InputError, match="max_classes"):
        mesma(x, hand_bundles, max_classes=4)
    with pytest.raises(InputError, match="max_rmse"):
        mesma(x, hand_bundles, max_rmse=-1)
    with pytest.raises(InputError, match="fraction_bounds"):
        mesma(x, hand_bundles, fraction_bounds=(1, 0))
    with pytest.raises(InputError, match="min_rmse_gain"):
        mesma(x, hand_bundles, min_rmse_gain=np.nan)
    with pytest.raises(InputError, match="clashes with the shade"):
        mesma(x, {"shade": np.zeros((1, 6))}, shade=np.zeros(6))
    # 3 classes + shade need 3 bands under sum-to-one; 2 bands cannot separate them
    with pytest.raises(RankError, match="max_classes"):
        mesma(x[:, :2], {k: v[:, :2] for k, v in hand_bundles.items()}, shade=np.zeros(2))
    assert isinstance(BandMismatchError("x"), ValueError)


def test_collinear_models_warn_and_are_skipped(hand_bundles):
    # A member that is a copy of another class's member makes the 2-class models of those two
    # collinear: they are skipped with a CollinearityWarning naming them.
    b = {**hand_bundles, "dry": hand_bundles["soil"][:1].copy()}
    with pytest.warns(CollinearityWarning, match="collinear"):
        res = mesma(np.full(6, 0.2), b, shade=np.zeros(6))
    full = len(candidate_models([2, 1, 2], 3))
    assert res.n_models < full


def test_constraint_enum_values():
    assert [c.value for c in MesmaConstraint] == ["sum-to-one", "fcls"]
    assert MesmaConstraint("fcls") is MesmaConstraint.FCLS


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n_bands=st.integers(4, 30))
def test_fcls_fractions_are_physical(seed, n_bands):
    # Property of fully constrained least squares (Heinz & Chang 2001): every modelled pixel's
    # fractions are non-negative and sum to one; the rmse limit holds.
    rng = np.random.default_rng(seed)
    bundles = make_bundles(rng, 3, 2, n_bands)
    x = rng.uniform(0.0, 0.6, (30, n_bands)).astype(np.float32)
    x[:10] = make_scene(rng, bundles, np.zeros(n_bands), 10)[0]
    res = mesma(x, bundles, shade=np.zeros(n_bands), constraint="fcls")
    ok = ~res.unmodelled
    assert np.all(res.fractions[ok] >= 0)
    np.testing.assert_allclose(res.fractions[ok].sum(axis=-1), 1.0, atol=1e-5)
    assert np.all(res.rmse[ok] <= 0.025 + 1e-7)
    assert np.all(np.isnan(res.fractions[~ok]))
