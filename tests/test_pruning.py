"""Tests of unmix.pruning: EAR, MASA, CoB bundle pruning, checked by hand and against cvxpy."""

from __future__ import annotations

import cvxpy as cp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from unmix import pruning as pr
from unmix.errors import InputError, ShapeError, UnknownNameError
from unmix.io.library import read_shipped_library

# Hand case 1: one class of three 2-band spectra, photometric (zero) shade.
#   A = (0.3, 0), B = (0, 0.4), C = (0.3, 0.4); D = (0.5, 0.1) alone in class "m".
#   Candidate i models x_j with f = e_i.x_j / |e_i|^2; residual = component of x_j orthogonal to e_i.
#   A models B: f 0, |res| 0.4 -> RMSE 0.4/sqrt2 = 0.282843;  A models C: f 1, |res| 0.4 -> 0.282843
#   B models A: f 0, |res| 0.3 -> 0.212132;                   B models C: f 1, |res| 0.3 -> 0.212132
#   C models A: f 0.09/0.25 = 0.36, res (0.192, -0.144), |res| 0.24 -> 0.169706
#   C models B: f 0.16/0.25 = 0.64, res (-0.192, 0.144), |res| 0.24 -> 0.169706
#   EAR = (0.282843, 0.212132, 0.169706, NaN)
#   Angles: A-B 90°, A-C atan(4/3) = 53.1301°, B-C 36.8699°
#   MASA = (71.5651°, 63.4349°, 45°, NaN)
HAND1 = np.array([[0.3, 0.0], [0.0, 0.4], [0.3, 0.4], [0.5, 0.1]])
HAND1_CLASSES = ["k", "k", "k", "m"]


def test_ear_hand_case():
    # Dennison & Roberts 2003 (RSE 87:123-135), EAR definition; numbers worked out above.
    got = pr.ear(HAND1, HAND1_CLASSES)
    np.testing.assert_allclose(got[:3], [0.4 / np.sqrt(2), 0.3 / np.sqrt(2), 0.24 / np.sqrt(2)], rtol=1e-12)
    assert np.isnan(got[3])


def test_masa_hand_case():
    # Dennison, Halligan & Roberts 2004 (RSE 93:359-367), MASA definition; numbers worked out above.
    got = np.rad2deg(pr.masa(HAND1, HAND1_CLASSES))
    a_c = np.rad2deg(np.arctan2(0.4, 0.3))
    np.testing.assert_allclose(got[:3], [(90 + a_c) / 2, (90 + 90 - a_c) / 2, 45.0], rtol=1e-12)
    assert np.isnan(got[3])


def test_prune_keeps_lowest_ear_and_masa_and_lone_members():
    # Dennison & Roberts 2003; Dennison et al. 2004: C has the lowest EAR and MASA of class k; the lone
    # D of class m is kept (it is the class's only representative).
    assert pr.prune(HAND1, HAND1_CLASSES, method="ear").indices.tolist() == [2, 3]
    assert pr.prune(HAND1, HAND1_CLASSES, method="masa").indices.tolist() == [2, 3]
    assert pr.prune(HAND1, HAND1_CLASSES, method="ear", keep=2).indices.tolist() == [1, 2, 3]


# Hand case 2 (CoB): limits RMSE <= 0.025, -0.05 <= f <= 1.05 (Roberts et al. 1998).
#   soil: S1 (0.30, 0.40), S2 (0.33, 0.44) = 1.1 S1, S3 (0.15, 0.20) = 0.5 S1, S4 (0.30, 0.25)
#   veg:  V1 (0.05, 0.40), V2 (0.06, 0.08) = 0.2 S1
#   S1 models S2: f 1.1 > 1.05 no; S3: f 0.5, RMSE 0 yes; S4: f 0.76, |res| 0.09 -> 0.0636 no;
#      V1: |res| 0.2 no; V2: f 0.2, RMSE 0 yes (out)                     -> in 1, out 1
#   S2 models S1: f 0.909 yes; S3: f 0.4545 yes; S4: |res| 0.09 no; V2: f 0.18 yes (out) -> in 2, out 1
#   S3 models S1: f 2 no; S2: f 2.2 no; S4: f 1.52 no; V2: f 0.4 yes (out) -> in 0, out 1
#   S4 models S1: f 1.246 no; S2: f 1.370 no; S3: f 0.623, |res| 0.25 sin(θ) with cos θ = 0.19 /
#      (0.5 * 0.390512) -> sin θ 0.23046, |res| 0.0576 -> 0.0407 no; V2: f 0.249, |res| 0.1 * 0.23046
#      -> 0.0163 yes (out)                                                 -> in 0, out 1
#   V1 models V2: f 0.215, cos θ = 0.035 / (0.403113 * 0.1) -> sin θ 0.49614, |res| 0.0496 -> 0.0351 no;
#      soils: angles ~30° no                                               -> in 0, out 0
#   V2 models everything with f >= 2.5 (or a 30° angle)                    -> in 0, out 0
#   cob_index = in / (out + 1) / (n_class - 1): S1 1/2/3, S2 2/2/3, others 0.
#   Keep 1 per class: soil S2 (most in-class); veg V1 and V2 tie on counts, EAR breaks it:
#      EAR V1 = 0.0351 < EAR V2 = 0.2 / sqrt2 = 0.1414 -> V1.
HAND2 = np.array([[0.30, 0.40], [0.33, 0.44], [0.15, 0.20], [0.30, 0.25], [0.05, 0.40], [0.06, 0.08]])
HAND2_CLASSES = ["soil"] * 4 + ["veg"] * 2


def test_cob_hand_case():
    # Roberts et al. 2003 (IEEE TGRS 41(6)) count-based selection; counts worked out above.
    r = pr.cob(HAND2, HAND2_CLASSES)
    assert r.in_count.tolist() == [1, 2, 0, 0, 0, 0]
    assert r.out_count.tolist() == [1, 1, 1, 1, 0, 0]
    np.testing.assert_allclose(r.cob_index, [1 / 6, 1 / 3, 0, 0, 0, 0])
    assert pr.prune(HAND2, HAND2_CLASSES, method="cob").indices.tolist() == [1, 4]
    # a looser RMSE limit (0.05) lets S4 model S3 (RMSE 0.0407) but not S1 model S4 (0.0636)
    r2 = pr.cob(HAND2, HAND2_CLASSES, max_rmse=0.05)
    assert r2.in_count[3] == 1 and r2.in_count[0] == 1
    # widening the fraction range to 1.2 lets S1 model S2 (f = 1.1)
    r3 = pr.cob(HAND2, HAND2_CLASSES, fraction_range=(-0.05, 1.2))
    assert r3.in_count[0] == 2


@settings(max_examples=12, deadline=None)
@given(seed=st.integers(0, 100_000), with_shade=st.booleans())
def test_two_endmember_model_matches_cvxpy(seed, with_shade):
    # Two-endmember model with sum-to-one fractions (Dennison & Roberts 2003), reference: the same
    # least-squares problem solved by cvxpy with an explicit equality constraint.
    rng = np.random.default_rng(seed)
    s = rng.uniform(0.05, 0.6, (3, 7))
    shade = rng.uniform(0.0, 0.03, 7) if with_shade else np.zeros(7)
    m = pr.two_endmember_models(s, shade)
    for i in range(3):
        for j in range(3):
            a = cp.Variable(2)
            model = a[0] * s[i] + a[1] * shade
            prob = cp.Problem(cp.Minimize(cp.sum_squares(s[j] - model)), [cp.sum(a) == 1])
            prob.solve()
            fitted = a.value[0] * s[i] + a.value[1] * shade
            rmse = np.sqrt(np.mean((s[j] - fitted) ** 2))
            ang = np.arccos(np.clip(fitted @ s[j] / np.linalg.norm(fitted) / np.linalg.norm(s[j]), -1, 1))
            assert m.fraction[i, j] == pytest.approx(a.value[0], abs=1e-5)
            assert m.rmse[i, j] == pytest.approx(rmse, abs=1e-6)
            assert m.angle[i, j] == pytest.approx(ang, abs=1e-4)


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 100_000), n=st.integers(2, 9))
def test_ear_masa_match_loop_reference(seed, n):
    # Definitions written as plain loops over pairs (numpy lstsq for the one-fraction fit).
    rng = np.random.default_rng(seed)
    s = rng.uniform(0.02, 0.7, (n, 5))
    cls = rng.choice(["a", "b", "c"], size=n).tolist()
    ear_ref = np.full(n, np.nan)
    masa_ref = np.full(n, np.nan)
    for i in range(n):
        r, g = [], []
        for j in range(n):
            if j != i and cls[j] == cls[i]:
                f = np.linalg.lstsq(s[i][:, None], s[j], rcond=None)[0][0]
                r.append(np.sqrt(np.mean((s[j] - f * s[i]) ** 2)))
                g.append(np.arccos(np.clip(s[i] @ s[j] / np.linalg.norm(s[i]) / np.linalg.norm(s[j]), -1, 1)))
        if r:
            ear_ref[i], masa_ref[i] = np.mean(r), np.mean(g)
    np.testing.assert_allclose(pr.ear(s, cls), ear_ref, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(pr.masa(s, cls), masa_ref, rtol=1e-7, atol=1e-9)


def test_select_per_class_hand_case():
    # Hand: class a scores 0.3, 0.1, 0.2 -> order 1, 2, 0; class b 0.5, NaN.
    sc = np.array([0.3, 0.1, 0.2, 0.5, np.nan])
    cls = ["a", "a", "a", "b", "b"]
    assert pr.select_per_class(sc, cls, keep=1).tolist() == [1, 3]
    assert pr.select_per_class(sc, cls, keep=2).tolist() == [1, 2, 3, 4]
    assert pr.select_per_class(sc, cls, keep=None, threshold=0.25).tolist() == [1, 2]
    assert pr.select_per_class(sc, cls, keep=1, higher_is_better=True).tolist() == [0, 3]


def test_bundles_library_pruned_one_per_class():
    # Shipped bundle library (2-3 members per class): one member per class survives each method.
    lib = read_shipped_library("demo_bundles")
    n_classes = len(set(lib.classes))
    for method in pr.PruningMethod:
        res = pr.prune(lib.spectra, lib.classes, method=method)
        kept_classes = [lib.classes[i] for i in res.indices]
        assert sorted(kept_classes) == sorted(set(lib.classes)) and len(kept_classes) == n_classes


def test_bad_input():
    with pytest.raises(InputError, match="class label"):
        pr.ear(HAND1, ["k", None, "k", "m"])
    with pytest.raises(ShapeError):
        pr.masa(HAND1, ["k", "k"])
    with pytest.raises(InputError, match="NaN"):
        pr.cob(np.array([[0.1, np.nan], [0.2, 0.3]]), ["a", "a"])
    with pytest.raises(UnknownNameError, match="ear"):
        pr.prune(HAND1, HAND1_CLASSES, method="best")
    with pytest.raises(InputError, match="keep"):
        pr.prune(HAND1, HAND1_CLASSES, keep=0)
    with pytest.raises(InputError, match="fraction_range"):
        pr.cob(HAND1, HAND1_CLASSES, fraction_range=(1.0, 0.0))
    with pytest.raises(ShapeError, match="shade"):
        pr.ear(HAND1, HAND1_CLASSES, shade=np.zeros(3))
