"""Shared generated problems and outside references for the tests of unmix.solvers (tests/test_solvers_*.py)."""

from __future__ import annotations

import numpy as np
from hypothesis import assume

ALL = ["none", "sum-to-one", "non-negative", "fcls"]


# ------------------------------------------------------------------------------------------------
# helpers: generated problems and outside references
# ------------------------------------------------------------------------------------------------


def _cond(M, w=None, sum_to_one=True):
    A = M.T if w is None else M.T * np.sqrt(w)[:, None]
    if sum_to_one and M.shape[0] > 1:
        Z = np.linalg.svd(np.ones((1, M.shape[0])))[2][1:].T
        A = A @ Z
    s = np.linalg.svd(A, compute_uv=False)
    return s[0] / s[-1]


def make_endmembers(rng, p, nb, max_cond=200.0):
    """Reflectance-like endmembers (0.02..0.7), redrawn until well conditioned under every constraint."""
    for _ in range(1000):
        M = rng.uniform(0.02, 0.7, (p, nb))
        if p <= nb and _cond(M, sum_to_one=False) < max_cond or p == nb + 1 and _cond(M) < max_cond:
            return M
    raise AssertionError("could not draw well-conditioned endmembers")


def make_pixels(rng, M, n, spread=1.0, noise=0.01):
    """Mixtures: Dirichlet fractions stretched by ``spread`` around the centre, so spread > 1 puts part
    of the pixels outside the simplex; plus Gaussian noise."""
    p, nb = M.shape
    a = rng.dirichlet(np.ones(p), size=n)
    a = (a - 1.0 / p) * spread + 1.0 / p
    return a @ M + rng.normal(0.0, noise, (n, nb))


def objective(x, M, a, w=None):
    r = x - a @ M
    if w is not None:
        r = r * np.sqrt(w)
    return 0.5 * np.sum(r * r, axis=-1)


# ------------------------------------------------------------------------------------------------
# properties (hypothesis)
# ------------------------------------------------------------------------------------------------


def _draw_problem(seed, p, extra):
    rng = np.random.default_rng(seed)
    nb = p + extra
    M = rng.uniform(0.02, 0.7, (p, nb))
    assume(_cond(M, sum_to_one=False) < 100)
    return rng, M
