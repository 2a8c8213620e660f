"""Tests of the MESMA model selection rule (unmix.mesma.mesma).

References used below:
- Roberts et al. (1998), Remote Sensing of Environment 65:267-279, doi:10.1016/S0034-4257(98)00037-6:
  candidate models of one member per class plus shade, sum-to-one least squares, acceptance limits
  (rmse <= 0.025, fractions -0.05..1.05, shade limit), the simplest accepted model is kept.
- Franke et al. (2009), Remote Sensing of Environment 113:1712-1723, doi:10.1016/j.rse.2009.03.018:
  a larger model only for a minimum rmse gain (the rule is re-implemented slowly below).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from _mesma_helpers import (
    candidate_models,
    hand_bundles_fixture,  # noqa: F401  (registers the "hand_bundles" fixture)
    kkt_sum_to_one,
    make_bundles,
    make_scene,
)

from unmix.errors import CollinearityWarning
from unmix.mesma import mesma


def reference_select(x, bundles, shade, *, constraint, max_rmse=0.025, bounds=(-0.05, 1.05),
                     max_shade=0.8, gain=0.001, max_classes=None, weights=None):
    """Selection rule of the unmix.mesma docstring, one pixel at a time; per-model solutions from
    unmix.solvers.estimate_fractions (the plain FCLS / sum-to-one kernel, independent code)."""
    from unmix.solvers import estimate_fractions

    names = list(bundles)
    nc = len(names)
    max_classes = nc if max_classes is None else max_classes
    models = candidate_models([bundles[c].shape[0] for c in names], max_classes)
    n_pix = x.shape[0]
    per_model = []
    for combo in models:
        M = np.array([bundles[names[k]][j] for k, j in combo] + ([shade] if shade is not None else []))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", CollinearityWarning)
            f, r = estimate_fractions(x.astype(np.float64), M, constraint=constraint, weights=weights)
        per_model.append((combo, f, r))
    out_f = np.full((n_pix, nc + (shade is not None)), np.nan)
    out_m = np.full((n_pix, nc), -1)
    out_r = np.full(n_pix, np.nan)
    out_u = np.zeros(n_pix, bool)
    for i in range(n_pix):
        if np.isnan(x[i]).any():
            continue
        chosen = None
        for size in range(1, max_classes + 1):
            best = None
            for combo, f, r in per_model:
                if len(combo) != size:
                    continue
                fi, ri = f[i], r[i]
                cls_f = fi[:size]
                if constraint == "fcls" and np.any(cls_f <= 1e-12):
                    continue  # a class at its bound: the smaller model's fit (documented rule)
                ok = ri <= max_rmse and np.all(cls_f >= bounds[0]) and np.all(cls_f <= bounds[1])
                if shade is not None:
                    ok = ok and bounds[0] <= fi[-1] <= max_shade
                if ok and (best is None or ri < best[2]):
                    best = (combo, fi, ri)
            if best is not None and (chosen is None or best[2] < chosen[2] - gain):
                chosen = best
        if chosen is None:
            out_u[i] = True
            continue
        combo, fi, ri = chosen
        out_f[i] = 0.0
        for (k, j), v in zip(combo, fi):
            out_f[i, k] = v
            out_m[i, k] = j
        if shade is not None:
            out_f[i, -1] = fi[-1]
        out_r[i] = ri
    return out_f, out_m, out_r, out_u


# --------------------------------------------------------------------------------------------
# the selection rule


@pytest.mark.parametrize("constraint", ["sum-to-one", "fcls"])
@pytest.mark.parametrize("gain", [0.0, 0.001, 0.0025, np.inf])
def test_selection_matches_slow_reference(constraint, gain):
    # Reference: the slow per-pixel implementation of the documented rule above (Roberts et al.
    # 1998 acceptance limits; Franke et al. 2009 style rmse gain for larger models).
    rng = np.random.default_rng(4)
    nb = 6
    bundles = make_bundles(rng, 3, 3, nb)
    shade = np.zeros(nb)
    x = np.concatenate([
        make_scene(rng, bundles, shade, 60, snr_db=30)[0],
        make_scene(rng, bundles, shade, 40, n_classes_in_pixel=1)[0],
        make_scene(rng, bundles, shade, 40, n_classes_in_pixel=2)[0],
        rng.uniform(0.0, 0.6, (20, nb)),
    ])
    x[5, 2] = np.nan
    res = mesma(x, bundles, shade=shade, constraint=constraint, min_rmse_gain=gain)
    f, m, r, u = reference_select(x, bundles, shade, constraint=constraint, gain=gain)
    np.testing.assert_array_equal(res.members, m)
    np.testing.assert_array_equal(res.unmodelled, u)
    np.testing.assert_allclose(res.fractions, f, atol=1e-7)
    np.testing.assert_allclose(res.rmse, r, atol=1e-9)
    assert u.any() and (~u).sum() > 100  # both outcomes occur


def test_selection_options_match_slow_reference():
    # Same reference with non-default limits, max_classes and band weights, no shade.
    rng = np.random.default_rng(5)
    nb = 8
    bundles = make_bundles(rng, 3, 2, nb)
    x = make_scene(rng, bundles, np.zeros(nb), 80)[0] * 1.1
    w = rng.uniform(0.5, 2.0, nb)
    kw = dict(max_rmse=0.03, bounds=(-0.1, 1.1), gain=0.001, max_classes=2, weights=w)
    for constraint in ("sum-to-one", "fcls"):
        res = mesma(x, bundles, constraint=constraint, max_rmse=0.03, fraction_bounds=(-0.1, 1.1),
                    min_rmse_gain=0.001, max_classes=2, weights=w)
        f, m, r, u = reference_select(x, bundles, None, constraint=constraint, **kw)
        np.testing.assert_array_equal(res.members, m)
        np.testing.assert_array_equal(res.unmodelled, u)
        np.testing.assert_allclose(res.fractions, f, atol=1e-7)
        np.testing.assert_allclose(res.rmse, r, atol=1e-9)
        assert res.names == tuple(bundles)


@pytest.mark.parametrize("constraint", ["sum-to-one", "fcls"])
@pytest.mark.parametrize("gain", [0.0, 0.001, 0.0025])
def test_exact_two_class_mixture_selects_two_class_model(hand_bundles, constraint, gain):
    # Roberts et al. (1998): the simplest model that meets the limits; an exact mixture of green[1],
    # soil[0] and shade must not be replaced by a 3-class model (which cannot lower rmse below 0).
    x = 0.55 * hand_bundles["green"][1] + 0.3 * hand_bundles["soil"][0]  # shade 0.15
    res = mesma(x, hand_bundles, shade=np.zeros(6), constraint=constraint, min_rmse_gain=gain)
    assert res.members.tolist() == [1, -1, 0]
    np.testing.assert_allclose(res.fractions, [0.55, 0.0, 0.3, 0.15], atol=1e-9)
    assert res.rmse < 1e-9 and not res.unmodelled


def test_unfit_pixel_is_flagged(hand_bundles):
    # A flat bright spectrum is no sum-to-one mixture of these spectra within 0.025 rmse
    # (Roberts et al. 1998 acceptance limit).
    x = np.full(6, 0.8)
    res = mesma(x, hand_bundles, shade=np.zeros(6))
    assert bool(res.unmodelled)
    assert np.all(np.isnan(res.fractions)) and np.isnan(res.rmse)
    assert res.members.tolist() == [-1, -1, -1]


def test_fraction_bounds_reject(hand_bundles):
    # 1.2 x green[0]: fraction 1.2 and shade -0.2 -> outside -0.05..1.05 (Roberts et al. 1998), so
    # unmodelled; widening the bounds accepts the same 1-class model.
    x = 1.2 * hand_bundles["green"][0]
    res = mesma(x, hand_bundles, shade=np.zeros(6))
    assert bool(res.unmodelled)
    res = mesma(x, hand_bundles, shade=np.zeros(6), fraction_bounds=(-0.3, 1.3))
    assert res.members.tolist() == [0, -1, -1]
    np.testing.assert_allclose(res.fractions, [1.2, 0, 0, -0.2], atol=1e-9)


def test_max_shade_rejects(hand_bundles):
    # 10 % soil, 90 % shade: shade 0.9 > max_shade 0.8 -> rejected; accepted with max_shade 0.95.
    x = 0.1 * hand_bundles["soil"][1]
    assert bool(mesma(x, hand_bundles, shade=np.zeros(6)).unmodelled)
    res = mesma(x, hand_bundles, shade=np.zeros(6), max_shade=0.95)
    assert res.members.tolist() == [-1, -1, 1]
    np.testing.assert_allclose(res.fractions, [0, 0, 0.1, 0.9], atol=1e-9)


def test_rmse_limit_rejects(hand_bundles):
    # A 2-class mixture with a bump in one band that no model can follow. Reference: the smallest
    # rmse over all candidate models, from numpy's KKT solve (Heinz & Chang 2001). max_rmse below
    # it rejects every model (Roberts et al. 1998 rmse limit), the default 0.025 does not.
    x = 0.5 * hand_bundles["green"][0] + 0.5 * hand_bundles["dry"][0]
    x = x + np.array([0.0, 0.0, 0.0, 0.015, 0.0, 0.0])
    names = list(hand_bundles)
    best = np.inf  # smallest rmse among models within the fraction and shade limits
    for combo in candidate_models([2, 1, 2], 3):
        M = np.array([hand_bundles[names[k]][j] for k, j in combo] + [np.zeros(6)])
        a = kkt_sum_to_one(x, M)
        if np.all(a[:-1] >= -0.05) and np.all(a[:-1] <= 1.05) and -0.05 <= a[-1] <= 0.8:
            best = min(best, np.sqrt(np.mean((x - a @ M) ** 2)))
    assert 1e-4 < best < 0.02
    assert not bool(mesma(x, hand_bundles, shade=np.zeros(6)).unmodelled)
    assert bool(mesma(x, hand_bundles, shade=np.zeros(6), max_rmse=0.9 * best).unmodelled)
    assert not bool(mesma(x, hand_bundles, shade=np.zeros(6), max_rmse=1.1 * best).unmodelled)


def test_members_index_into_bundles(hand_bundles):
    # Every chosen member reproduces the pixel: rebuilding the spectrum from members and fractions
    # gives the reported rmse (definition of rmse, Roberts et al. 1998).
    rng = np.random.default_rng(6)
    shade = np.zeros(6)
    x, _, _ = make_scene(rng, hand_bundles, shade, 200)
    res = mesma(x, hand_bundles, shade=shade)
    names = list(hand_bundles)
    ok = ~res.unmodelled
    assert ok.sum() > 150
    for i in np.flatnonzero(ok):
        model = np.zeros(6)
        for k, c in enumerate(names):
            if res.members[i, k] >= 0:
                model += res.fractions[i, k] * hand_bundles[c][res.members[i, k]]
            else:
                assert res.fractions[i, k] == 0
        assert np.sqrt(np.mean((x[i] - model) ** 2)) == pytest.approx(res.rmse[i], abs=1e-9)
        assert res.fractions[i].sum() == pytest.approx(1.0, abs=1e-9)  # sum-to-one incl. shade
