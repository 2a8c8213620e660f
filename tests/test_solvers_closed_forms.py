"""Tests of unmix.solvers: unconstrained and sum-to-one least squares (closed forms).

References used below (named beside each check): numpy.linalg.lstsq for the unconstrained problem;
the closed form of Heinz & Chang (2001) for sum-to-one (CHECKS.md "Linear unmixing").
"""

from __future__ import annotations

import numpy as np
import pytest
from _solvers_helpers import make_endmembers, make_pixels

from unmix.solvers import estimate_fractions

# ------------------------------------------------------------------------------------------------
# unconstrained and sum-to-one: closed forms
# ------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("p,nb", [(2, 3), (3, 6), (4, 7), (5, 200), (10, 12)])
def test_none_matches_lstsq(p, nb):
    rng = np.random.default_rng(p * 100 + nb)
    M = make_endmembers(rng, p, nb)
    x = make_pixels(rng, M, 50, spread=4.0, noise=0.05)
    f, rmse = estimate_fractions(x, M, constraint="none")
    # numpy.linalg.lstsq on the same problem (Keshava & Mustard 2002: a = (M M^T)^-1 M x)
    ref = np.linalg.lstsq(M.T, x.T, rcond=None)[0].T
    np.testing.assert_allclose(f, ref, atol=1e-10, rtol=0)
    np.testing.assert_allclose(rmse, np.sqrt(np.mean((x - ref @ M) ** 2, axis=1)), rtol=1e-9, atol=1e-13)


@pytest.mark.parametrize("p,nb", [(2, 3), (3, 6), (4, 7), (5, 200), (10, 12)])
def test_sum_to_one_matches_heinz_chang_closed_form(p, nb):
    rng = np.random.default_rng(7 * p + nb)
    M = make_endmembers(rng, p, nb)
    x = make_pixels(rng, M, 50, spread=4.0, noise=0.05)
    f, _ = estimate_fractions(x, M, constraint="sum-to-one")
    # Heinz & Chang (2001), CHECKS.md: a = a_LS + (M M^T)^-1 1 (1 - 1^T a_LS) / (1^T (M M^T)^-1 1)
    Ginv = np.linalg.inv(M @ M.T)
    a_ls = x @ M.T @ Ginv
    one = np.ones(p)
    h = Ginv @ one
    ref = a_ls + np.outer(1 - a_ls @ one, h) / (one @ h)
    np.testing.assert_allclose(f, ref, atol=1e-9, rtol=0)
    np.testing.assert_allclose(f.sum(axis=1), 1.0, atol=1e-12)


def test_sum_to_one_with_one_more_endmember_than_bands():
    # n_endmembers = n_bands + 1 is solvable under sum-to-one (affinely independent endmembers):
    # an exact mixture must be recovered exactly (common practice / linear algebra).
    rng = np.random.default_rng(3)
    M = make_endmembers(rng, 4, 3)
    a = rng.dirichlet(np.ones(4), size=20)
    for con in ("sum-to-one", "fcls"):
        f, rmse = estimate_fractions(a @ M, M, constraint=con)
        np.testing.assert_allclose(f, a, atol=1e-10)
        assert np.all(rmse < 1e-12)
