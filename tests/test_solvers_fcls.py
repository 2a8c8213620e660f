"""Tests of unmix.solvers.estimate_fractions: non-negative and fully constrained least squares.

References used below (named beside each check):
- cvxpy (general-purpose convex solver, CLARABEL interior point) on the same problems;
- scipy.optimize.nnls (Lawson-Hanson NNLS) on the endmember matrix, and on the matrix with a heavily
  weighted row of ones appended for FCLS (the sum-to-one augmentation of Heinz & Chang 2001);
- a slow, obvious exact reference in this file: enumerate every support, solve the equality-
  constrained least squares there and keep the best feasible one (exact for a strictly convex QP).
"""

from __future__ import annotations

import itertools
import zlib

import cvxpy as cp
import numpy as np
import pytest
from _solvers_helpers import ALL, _cond, _draw_problem, make_endmembers, make_pixels, objective
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.optimize import nnls

from unmix import solvers
from unmix.solvers import Constraint, estimate_fractions, kkt_residual


def cvxpy_solve(x, M, con, w=None):
    """Batched reference: all pixels as one cvxpy problem (pixels do not interact)."""
    n, p = x.shape[0], M.shape[0]
    A = cp.Variable((n, p))
    sw = np.ones(M.shape[1]) if w is None else np.sqrt(w)
    # scale to order one so the interior-point tolerances are relative ones
    scale = 1.0 / max(1e-12, float(np.abs(x).max()))
    res = cp.multiply(sw[None, :], x * scale - A @ M)
    cons = []
    if con in ("non-negative", "fcls"):
        cons.append(A >= 0)
    if con in ("sum-to-one", "fcls"):
        cons.append(cp.sum(A, axis=1) == scale)
    prob = cp.Problem(cp.Minimize(cp.sum_squares(res)), cons)
    prob.solve(solver=cp.CLARABEL, tol_gap_abs=1e-12, tol_gap_rel=1e-12, tol_feas=1e-12, max_iter=500)
    assert prob.status in ("optimal", "optimal_inaccurate")
    return A.value / scale


def exact_reference(x, M, con, w=None):
    """Slow, obvious exact solution: best feasible equality-constrained LS over every support."""
    p, nb = M.shape
    sw = np.ones(nb) if w is None else np.sqrt(w)
    A = M.T * sw[:, None]
    c = x * sw
    eq = con in ("sum-to-one", "fcls")
    supports = [tuple(range(p))] if con in ("none", "sum-to-one") else [
        S for k in range(1, p + 1) for S in itertools.combinations(range(p), k)
    ]
    if con == "non-negative":
        supports.append(())
    best = np.full(x.shape[0], np.inf)
    out = np.zeros((x.shape[0], p))
    for S in supports:
        a = np.zeros((x.shape[0], p))
        if S:
            AS = A[:, S]
            k = len(S)
            if eq:
                K = np.zeros((k + 1, k + 1))
                K[:k, :k] = AS.T @ AS
                K[:k, k] = K[k, :k] = 1.0
                rhs = np.concatenate([c @ AS, np.ones((x.shape[0], 1))], axis=1)
                a[:, S] = np.linalg.solve(K, rhs.T).T[:, :k]
            else:
                a[:, S] = np.linalg.lstsq(AS, c.T, rcond=None)[0].T
        feasible = np.ones(x.shape[0], bool) if con in ("none", "sum-to-one") else np.all(a >= -1e-13, axis=1)
        f = np.where(feasible, objective(x, M, a, w), np.inf)
        take = f < best
        best[take] = f[take]
        out[take] = a[take]
    return out


# ------------------------------------------------------------------------------------------------
# non-negative and FCLS: against cvxpy, scipy and the exact enumeration
# ------------------------------------------------------------------------------------------------

CASES = [
    # (p, nb, spread, weighted, max_cond): spread 1 = inside the simplex, larger = partly or far outside
    (3, 6, 1.0, False, 200.0),
    (4, 6, 2.0, False, 200.0),
    (4, 6, 8.0, True, 200.0),
    (5, 200, 3.0, False, 200.0),
    (5, 200, 3.0, True, 200.0),
    (6, 10, 3.0, False, 200.0),
    (4, 3, 2.0, False, 200.0),  # one endmember more than bands (FCLS only)
    (3, 6, 3.0, False, 5e3),  # near-collinear endmembers (below the warning threshold)
]


@pytest.mark.parametrize(
    "con, case",
    # more endmembers than bands is a valid problem only under sum-to-one
    [(con, case) for con in ("fcls", "non-negative") for case in CASES if con == "fcls" or case[0] <= case[1]],
)
def test_against_cvxpy(con, case):
    p, nb, spread, weighted, max_cond = case
    rng = np.random.default_rng(zlib.crc32(repr((con, case)).encode()))
    if max_cond > 1000:
        # near-collinear: a third endmember close to a blend of the first two
        M = rng.uniform(0.05, 0.6, (p, nb))
        M[2] = 0.5 * M[0] + 0.5 * M[1] + rng.normal(0, 2e-3, nb)
        cond = max(_cond(M), _cond(M, sum_to_one=False))
        assert 100 < cond < solvers.COLLINEARITY_WARN_CONDITION
    else:
        M = make_endmembers(rng, p, nb, max_cond)
        cond = max(_cond(M), _cond(M, sum_to_one=False)) if p <= nb else _cond(M)
    w = rng.uniform(0.2, 5.0, nb) if weighted else None
    x = make_pixels(rng, M, 60, spread=spread, noise=0.02)
    f, rmse = estimate_fractions(x, M, constraint=con, weights=w)
    ref = cvxpy_solve(x, M, con, w)
    # our objective is never worse than cvxpy's (up to its interior-point tolerance)
    ours, theirs = objective(x, M, f, w), objective(x, M, ref, w)
    assert np.all(ours <= theirs + 1e-9 * (1 + theirs))
    # and feasibility is exact
    assert np.all(f >= 0)
    if con == "fcls":
        np.testing.assert_allclose(f.sum(axis=1), 1.0, atol=1e-12)
    if cond <= 200:  # well conditioned: cvxpy's interior point pins the fractions to ~1e-7
        np.testing.assert_allclose(f, ref, atol=1e-6)
    else:  # near-collinear: cvxpy's fractions drift (~1e-6); the exact enumeration does not
        np.testing.assert_allclose(f, exact_reference(x, M, con, w), atol=1e-8)
    np.testing.assert_allclose(rmse, np.sqrt(np.mean((x - f @ M) ** 2, axis=1)), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("con", ["fcls", "non-negative"])
@pytest.mark.parametrize(
    "p,nb,spread", [(2, 4, 5.0), (3, 5, 3.0), (4, 6, 10.0), (5, 8, 2.0), (6, 12, 4.0), (4, 60, 3.0)]
)
def test_against_exact_enumeration(con, p, nb, spread):
    rng = np.random.default_rng(11 * p + nb)
    M = make_endmembers(rng, p, nb)
    w = rng.uniform(0.5, 2.0, nb)
    x = make_pixels(rng, M, 200, spread=spread, noise=0.03)
    for weights in (None, w):
        f, _ = estimate_fractions(x, M, constraint=con, weights=weights)
        # the slow obvious reference above (exact for a strictly convex QP)
        np.testing.assert_allclose(f, exact_reference(x, M, con, weights), atol=1e-10)


def test_on_the_fly_subproblems_match_the_tables(monkeypatch):
    # The per-support operator tables (p <= 10) and the dense on-the-fly solve must give the same
    # exact answer; reference: the exact enumeration above.
    rng = np.random.default_rng(5)
    M = make_endmembers(rng, 5, 9)
    x = make_pixels(rng, M, 300, spread=6.0, noise=0.02)
    monkeypatch.setattr(solvers.fcls, "_TABLE_MAX_ENDMEMBERS", 0)  # the operator tables live in unmix.solvers.fcls
    for con in ("fcls", "non-negative"):
        f, _ = estimate_fractions(x, M, constraint=con)
        np.testing.assert_allclose(f, exact_reference(x, M, con), atol=1e-10)


def test_many_endmembers_beyond_the_tables():
    # 12 endmembers (> 10: subproblems solved on the fly) against cvxpy
    rng = np.random.default_rng(12)
    M = make_endmembers(rng, 12, 30, max_cond=500)
    x = make_pixels(rng, M, 40, spread=3.0, noise=0.02)
    for con in ("fcls", "non-negative"):
        f, _ = estimate_fractions(x, M, constraint=con)
        ref = cvxpy_solve(x, M, con)
        assert np.all(objective(x, M, f) <= objective(x, M, ref) + 1e-9)
        np.testing.assert_allclose(f, ref, atol=1e-6)


def test_fcls_against_scipy_nnls_with_sum_to_one_row():
    # Heinz & Chang (2001): FCLS ~ NNLS on [delta * 1^T; M^T] a = [delta; x] for a large delta
    # (a penalty approximation, hence the looser tolerance); scipy.optimize.nnls as the NNLS.
    rng = np.random.default_rng(21)
    for p, nb in [(3, 6), (4, 6), (5, 200)]:
        M = make_endmembers(rng, p, nb)
        x = make_pixels(rng, M, 100, spread=3.0, noise=0.02)
        f, _ = estimate_fractions(x, M, constraint="fcls")
        delta = 1e3
        A = np.vstack([delta * np.ones(p), M.T])
        ref = np.array([nnls(A, np.concatenate([[delta], xi]))[0] for xi in x])
        np.testing.assert_allclose(f, ref, atol=1e-4)
        assert np.all(objective(x, M, f) <= objective(x, M, ref / ref.sum(1, keepdims=True)) + 1e-12)


def test_non_negative_against_scipy_nnls():
    # scipy.optimize.nnls (Lawson & Hanson) on the same matrix
    rng = np.random.default_rng(22)
    for p, nb in [(3, 6), (6, 8), (5, 200)]:
        M = make_endmembers(rng, p, nb)
        x = make_pixels(rng, M, 100, spread=5.0, noise=0.05)
        f, _ = estimate_fractions(x, M, constraint="non-negative")
        ref = np.array([nnls(M.T, xi)[0] for xi in x])
        np.testing.assert_allclose(f, ref, atol=1e-9)


def test_non_negative_all_zero_answer():
    # x with a non-positive correlation with every endmember: the NNLS optimum is a = 0 exactly
    # (KKT: gradient -M x >= 0 at a = 0; scipy.optimize.nnls agrees).
    rng = np.random.default_rng(4)
    M = make_endmembers(rng, 3, 6)
    x = -np.stack([M.sum(0), M[0], 0.5 * M[1] + 0.1 * M[2]])
    f, rmse = estimate_fractions(x, M, constraint="non-negative")
    assert np.all(f == 0)
    np.testing.assert_allclose(rmse, np.sqrt(np.mean(x**2, axis=1)), rtol=1e-14)
    for xi in x:
        assert np.all(nnls(M.T, xi)[0] == 0)


def test_far_outside_the_simplex():
    # pixels a hundred times brighter or darker than any endmember, and on the far side of a vertex:
    # still the exact optimum (exact enumeration reference); FCLS is then a vertex or an edge.
    rng = np.random.default_rng(8)
    M = make_endmembers(rng, 4, 6)
    x = np.concatenate([100 * M, -100 * M, M[:1] + 50 * (M[:1] - M[1:2]), rng.normal(0, 30, (20, 6))])
    for con in ("fcls", "non-negative"):
        f, _ = estimate_fractions(x, M, constraint=con)
        np.testing.assert_allclose(f, exact_reference(x, M, con), atol=1e-10)
        assert np.all(kkt_residual(x, M, f, constraint=con) < 1e-10)
    f, _ = estimate_fractions(M[:1] + 50 * (M[:1] - M[1:2]), M)
    np.testing.assert_allclose(f[0], [1, 0, 0, 0], atol=1e-12)  # beyond vertex 0: vertex 0 (geometry)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.filter_too_much])
@given(seed=st.integers(0, 2**32 - 1), p=st.integers(2, 6), extra=st.integers(0, 6))
def test_fcls_properties(seed, p, extra):
    rng, M = _draw_problem(seed, p, extra)
    a = rng.dirichlet(np.ones(p), size=30)
    # an exact mixture inside the simplex is recovered exactly (definition of the model)
    f, rmse = estimate_fractions(a @ M, M)
    np.testing.assert_allclose(f, a, atol=1e-9)
    assert np.all(rmse < 1e-12)
    # arbitrary pixels: feasible, rmse >= 0 (definition of the constraint set)
    x = make_pixels(rng, M, 30, spread=5.0, noise=0.1)
    f, rmse = estimate_fractions(x, M)
    assert np.all(f >= 0)
    np.testing.assert_allclose(f.sum(axis=1), 1.0, atol=1e-12)
    assert np.all(rmse >= 0)


# ------------------------------------------------------------------------------------------------
# dtypes, shapes, NaN, weights
# ------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("con", ALL)
def test_float32_in_float32_out(con):
    rng = np.random.default_rng(1)
    M = make_endmembers(rng, 3, 6)
    x = make_pixels(rng, M, 40, spread=3.0)
    f64, r64 = estimate_fractions(x.astype(np.float32).astype(np.float64), M, constraint=con)
    f32, r32 = estimate_fractions(x.astype(np.float32), M, constraint=con)
    assert f32.dtype == np.float32 and r32.dtype == np.float32
    assert f64.dtype == np.float64 and r64.dtype == np.float64
    # computed in float64 inside: the float32 outputs are the float64 ones rounded (common practice)
    np.testing.assert_allclose(f32, f64.astype(np.float32), rtol=0, atol=1e-6)
    np.testing.assert_allclose(r32, r64.astype(np.float32), rtol=1e-6, atol=1e-9)
    fi, _ = estimate_fractions(np.round(x * 1e4).astype(np.int32), M * 1e4, constraint=con)
    assert fi.dtype == np.float64


@pytest.mark.parametrize("con", ALL)
def test_nan_pixels_are_isolated(con):
    rng = np.random.default_rng(2)
    M = make_endmembers(rng, 4, 6)
    x = make_pixels(rng, M, 30, spread=3.0)
    clean, clean_rmse = estimate_fractions(x, M, constraint=con)
    x[3, 2] = np.nan
    x[7, :] = np.nan
    x[9, 0] = np.inf  # infinite counts as no data too
    f, rmse = estimate_fractions(x, M, constraint=con)
    bad = np.zeros(30, bool)
    bad[[3, 7, 9]] = True
    assert np.all(np.isnan(f[bad])) and np.all(np.isnan(rmse[bad]))
    np.testing.assert_array_equal(f[~bad], clean[~bad])
    np.testing.assert_array_equal(rmse[~bad], clean_rmse[~bad])
    assert np.all(np.isnan(kkt_residual(x, M, f, constraint=con)[bad]))


def test_leading_shapes():
    rng = np.random.default_rng(6)
    M = make_endmembers(rng, 3, 5)
    cube = make_pixels(rng, M, 24, spread=3.0).reshape(2, 3, 4, 5)
    f, rmse = estimate_fractions(cube, M)
    assert f.shape == (2, 3, 4, 3) and rmse.shape == (2, 3, 4)
    flat, flat_rmse = estimate_fractions(cube.reshape(-1, 5), M)
    np.testing.assert_array_equal(f.reshape(-1, 3), flat)
    f0, r0 = estimate_fractions(cube[1, 2, 3], M)
    assert f0.shape == (3,) and r0.shape == ()
    np.testing.assert_array_equal(f0, f[1, 2, 3])
    fe, re = estimate_fractions(np.empty((0, 7, 5), np.float32), M)
    assert fe.shape == (0, 7, 3) and re.shape == (0, 7) and fe.dtype == np.float32
    # a transposed (non-contiguous) view gives the same numbers
    ft, _ = estimate_fractions(np.asfortranarray(cube.reshape(-1, 5)), M)
    np.testing.assert_array_equal(ft, flat)


@pytest.mark.parametrize("con", ALL)
def test_weights_equal_scaled_bands(con):
    # weighted LS == LS on sqrt(w)-scaled bands and endmembers (definition of weighted LS)
    rng = np.random.default_rng(9)
    M = make_endmembers(rng, 4, 8)
    x = make_pixels(rng, M, 50, spread=3.0, noise=0.05)
    w = rng.uniform(0.1, 10.0, 8)
    sw = np.sqrt(w)
    f, rmse = estimate_fractions(x, M, constraint=con, weights=w)
    g, _ = estimate_fractions(x * sw, M * sw, constraint=con)
    np.testing.assert_allclose(f, g, atol=1e-10)
    # rmse stays the unweighted residual
    np.testing.assert_allclose(rmse, np.sqrt(np.mean((x - f @ M) ** 2, axis=1)), rtol=1e-12)
    if con == "none":  # numpy.linalg.lstsq on the scaled system
        ref = np.linalg.lstsq((M * sw).T, (x * sw).T, rcond=None)[0].T
        np.testing.assert_allclose(f, ref, atol=1e-10)


def test_constraint_enum_and_strings():
    rng = np.random.default_rng(10)
    M = make_endmembers(rng, 3, 5)
    x = make_pixels(rng, M, 10, spread=3.0)
    a = estimate_fractions(x, M, constraint=Constraint.NON_NEGATIVE)[0]
    b = estimate_fractions(x, M, constraint="non-negative")[0]
    np.testing.assert_array_equal(a, b)
    assert [c.value for c in Constraint] == ["none", "sum-to-one", "non-negative", "fcls"]


# ---------------------------------------------------------------- non-physical magnitudes stay on the simplex
@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), p=st.integers(2, 6), exponent=st.integers(0, 38),
       dtype=st.sampled_from([np.float32, np.float64]))
def test_fcls_fractions_stay_on_the_simplex_for_any_finite_input(seed, p, exponent, dtype):
    # an undeclared fill value (1e30, 3.4e38) or a wrong scale factor must never give fractions above 1
    # or a sum far from 1: every FCLS fraction of a finite input lies in [0, 1] and sums to 1 (1e-6)
    rng = np.random.default_rng(seed)
    nb = p + 3
    M = rng.uniform(0.02, 0.7, (p, nb))
    x = rng.uniform(0.0, 0.6, (50, nb))
    big = rng.random((50, nb)) < 0.3
    x[big] = rng.choice([-1.0, 1.0], big.sum()) * rng.uniform(1, 3.4, big.sum()) * 10.0 ** exponent
    x = x.astype(dtype)
    assert np.isfinite(x).all()
    f, _ = estimate_fractions(x, M, constraint="fcls")
    assert np.isfinite(f).all()
    assert (f >= 0).all() and (f <= 1).all()
    np.testing.assert_allclose(f.sum(-1), 1.0, rtol=0, atol=1e-6)


def test_fcls_of_a_huge_input_is_the_linear_programme_vertex():
    # For |x| -> inf the FCLS objective |M^T a - x|^2 is dominated by -2 x.M^T a: its minimiser over
    # the simplex is the solution of the linear programme max (M x).a, a >= 0, sum a = 1
    # (reference: scipy.optimize.linprog, HiGHS).
    from scipy.optimize import linprog

    rng = np.random.default_rng(11)
    M = rng.uniform(0.02, 0.7, (5, 8))
    for _ in range(20):
        x = rng.choice([-1.0, 1.0], 8) * rng.uniform(1, 3, 8) * 1e30
        # the LP's objective scaled to order one (the same optimum; HiGHS refuses 1e30 coefficients)
        lp = linprog(-(M @ x) / np.abs(x).max(), A_eq=np.ones((1, 5)), b_eq=[1.0], bounds=[(0, None)] * 5, method="highs")
        assert lp.status == 0, lp.message
        f, _ = estimate_fractions(x, M, constraint="fcls")
        np.testing.assert_allclose(f, lp.x, atol=1e-9)
