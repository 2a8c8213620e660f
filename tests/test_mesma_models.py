"""Tests of unmix.mesma.mesma_models: the per-model solutions of MESMA.

References used below:
- Heinz & Chang (2001), IEEE TGRS 39(3):529-545, doi:10.1109/36.911111: sum-to-one closed form and
  fully constrained least squares (here solved independently by cvxpy and by numpy's KKT solve).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from _mesma_helpers import kkt_sum_to_one, make_bundles, make_scene, smooth_spectra

from unmix.errors import CollinearityWarning
from unmix.mesma import mesma_models

# --------------------------------------------------------------------------------------------
# per-model solutions against outside references


@pytest.mark.parametrize("constraint", ["sum-to-one", "fcls"])
@pytest.mark.parametrize("shade_kind", ["zero", "dark", "none"])
@pytest.mark.parametrize("weighted", [False, True])
def test_models_match_plain_kernel(constraint, shade_kind, weighted):
    # Reference: unmix.solvers.estimate_fractions called once per model (Heinz & Chang 2001 closed
    # form / exact FCLS), on pixels inside and far outside the endmember simplex.
    from unmix.solvers import estimate_fractions

    rng = np.random.default_rng(1)
    nb = 7
    bundles = make_bundles(rng, 3, 2, nb)
    shade = {"zero": np.zeros(nb), "dark": smooth_spectra(rng, 1, nb, base=0.03 + np.zeros(nb), amp=0.01)[0],
             "none": None}[shade_kind]
    w = rng.uniform(0.5, 3.0, nb) if weighted else None
    x = np.concatenate([rng.uniform(0.0, 0.6, (40, nb)),
                        make_scene(rng, bundles, np.zeros(nb), 40)[0]]).astype(np.float64)
    fits = mesma_models(x, bundles, shade=shade, constraint=constraint, weights=w)
    names = list(bundles)
    assert fits.fractions.shape == (80, fits.members.shape[0], 3 + (shade is not None))
    for m, mem in enumerate(fits.members):
        used = [k for k in range(3) if mem[k] >= 0]
        M = np.array([bundles[names[k]][mem[k]] for k in used] + ([shade] if shade is not None else []))
        cols = used + ([3] if shade is not None else [])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", CollinearityWarning)
            f, r = estimate_fractions(x, M, constraint=constraint, weights=w)
        np.testing.assert_allclose(fits.fractions[:, m, cols], f, atol=1e-8)
        np.testing.assert_allclose(fits.rmse[:, m], r, atol=1e-9)
        absent = [k for k in range(3) if k not in used]
        assert np.all(fits.fractions[:, m, absent] == 0)


def test_sum_to_one_models_match_numpy_kkt():
    # Reference: numpy.linalg.solve of the KKT system of sum-to-one least squares (Heinz & Chang 2001).
    rng = np.random.default_rng(2)
    nb = 150
    bundles = make_bundles(rng, 3, 2, nb)
    shade = np.zeros(nb)
    x = make_scene(rng, bundles, shade, 20)[0]
    fits = mesma_models(x, bundles, shade=shade)
    names = list(bundles)
    for m, mem in enumerate(fits.members):
        used = [k for k in range(3) if mem[k] >= 0]
        M = np.array([bundles[names[k]][mem[k]] for k in used] + [shade])
        for i in range(0, 20, 3):
            a = kkt_sum_to_one(x[i], M)
            np.testing.assert_allclose(fits.fractions[i, m, used + [3]], a, atol=1e-9)
            rmse = np.sqrt(np.mean((x[i] - a @ M) ** 2))
            assert fits.rmse[i, m] == pytest.approx(rmse, abs=1e-9)


def test_fcls_models_match_cvxpy():
    # Reference: cvxpy (general convex solver) on min ||x - M^T a||^2, a >= 0, sum(a) = 1
    # (Heinz & Chang 2001), on pixels chosen so that the bounds are active.
    cp = pytest.importorskip("cvxpy")
    rng = np.random.default_rng(3)
    nb = 6
    bundles = make_bundles(rng, 3, 2, nb)
    shade = np.zeros(nb)
    x = np.concatenate([rng.uniform(0.0, 0.7, (8, nb)), 1.3 * bundles["class0"][:1]])
    fits = mesma_models(x, bundles, shade=shade, constraint="fcls")
    names = list(bundles)
    n_active = 0
    for m in range(0, fits.members.shape[0], 2):
        mem = fits.members[m]
        used = [k for k in range(3) if mem[k] >= 0]
        M = np.array([bundles[names[k]][mem[k]] for k in used] + [shade])
        for i in range(x.shape[0]):
            a = cp.Variable(M.shape[0])
            prob = cp.Problem(cp.Minimize(cp.sum_squares(x[i] - M.T @ a)), [a >= 0, cp.sum(a) == 1])
            prob.solve()
            ours = fits.fractions[i, m, used + [3]]
            n_active += int(np.any(a.value < 1e-6))
            np.testing.assert_allclose(ours, a.value, atol=2e-4)
            # ours is optimal: objective no worse than the reference solver's
            assert np.sum((x[i] - ours @ M) ** 2) <= prob.value + 1e-9
    assert n_active > 10  # the comparison did exercise the non-negativity bounds
