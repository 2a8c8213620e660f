"""Tests of unmix.solvers.diagnostics: KKT residual, rank and collinearity checks, input errors.

References used: the KKT optimality conditions in projected-gradient form (Bertsekas 1999, from
memory) at the solutions of unmix.solvers.estimate_fractions, which is itself checked against cvxpy
and scipy in tests/test_solvers_fcls.py.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from _solvers_helpers import ALL, _draw_problem, make_endmembers, make_pixels
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from unmix.errors import (
    BandMismatchError,
    CollinearityWarning,
    InputError,
    RankError,
    ShapeError,
    UnknownNameError,
)
from unmix.solvers import check_endmembers, estimate_fractions, kkt_residual


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.filter_too_much])
@given(seed=st.integers(0, 2**32 - 1), p=st.integers(2, 6), extra=st.integers(0, 6))
def test_kkt_residual_zero_at_optimum_and_not_elsewhere(seed, p, extra):
    rng, M = _draw_problem(seed, p, extra)
    x = make_pixels(rng, M, 20, spread=4.0, noise=0.05)
    w = rng.uniform(0.5, 2.0, M.shape[1])
    for con in ALL:
        f, _ = estimate_fractions(x, M, constraint=con, weights=w)
        # optimality: KKT conditions hold (projected-gradient form; Bertsekas 1999, from memory)
        assert np.all(kkt_residual(x, M, f, constraint=con, weights=w) < 1e-10)
        # a feasible but different point is not optimal (strictly convex problem): move towards a
        # random feasible point by 10 % of the way
        v = rng.dirichlet(np.ones(p), size=len(x))
        if con == "none" or con == "sum-to-one":
            v = v + rng.normal(0, 0.5, v.shape)
            if con == "sum-to-one":
                v = v - (v.sum(1, keepdims=True) - 1) / p
        elif con == "non-negative":
            v = v * rng.uniform(0.5, 2.0, (len(x), 1))
        moved = f + 0.1 * (v - f)
        far = np.max(np.abs(moved - f), axis=1) > 1e-3
        assert np.all(kkt_residual(x, M, moved, constraint=con, weights=w)[far] > 1e-8)
    # an infeasible point (negative fraction) is flagged under the non-negative constraints
    f, _ = estimate_fractions(x, M)
    bad = f.copy()
    bad[:, 0] -= 0.05
    bad[:, 1] += 0.05
    neg = bad[:, 0] < 0
    # the projection is non-negative, so the residual is at least the negative part (definition)
    r = kkt_residual(x, M, bad, constraint="fcls")
    assert np.all(r[neg] >= -bad[neg, 0] * (1 - 1e-9))
    r = kkt_residual(x, M, np.abs(bad) * 1.5, constraint="fcls")  # sums to more than one
    assert np.all(r > 1e-3)


# ------------------------------------------------------------------------------------------------
# errors and warnings
# ------------------------------------------------------------------------------------------------


def test_rank_errors():
    rng = np.random.default_rng(13)
    M = rng.uniform(0, 1, (5, 4))
    x = rng.uniform(0, 1, (3, 4))
    estimate_fractions(x, M, constraint="fcls")  # 5 <= 4 + 1: fine
    with pytest.raises(RankError, match=r"5 endmembers .* 4 bands .*'none'"):
        estimate_fractions(x, M, constraint="none")
    with pytest.raises(RankError, match="n_bands"):
        estimate_fractions(x, M, constraint="non-negative")
    M6 = rng.uniform(0, 1, (6, 4))
    with pytest.raises(RankError, match=r"6 endmembers .* 4 bands .*'fcls' \(at most n_bands \+ 1 = 5\)"):
        estimate_fractions(x, M6)
    # two identical endmembers: exactly dependent, named
    Md = rng.uniform(0, 1, (3, 6))
    Md[2] = Md[0]
    with pytest.raises(RankError, match=r"'soil' \(row 0\) and 'sand' \(row 2\)"):
        check_endmembers(Md, names=["soil", "gv", "sand"])
    # an all-zero shade endmember: fine with sum-to-one, rank deficient without
    Ms = np.vstack([rng.uniform(0, 1, (2, 6)), np.zeros(6)])
    check_endmembers(Ms, constraint="fcls")
    with pytest.raises(RankError, match="shade"):
        check_endmembers(Ms, constraint="non-negative")
    assert issubclass(RankError, ValueError)


def test_collinearity_warning_names_the_pair():
    rng = np.random.default_rng(14)
    M = rng.uniform(0.05, 0.6, (4, 6))
    M[3] = M[1] * (1 + rng.normal(0, 1e-5, 6))
    with pytest.warns(CollinearityWarning, match=r"'npv' \(row 1\) and 'sand' \(row 3\).*condition number"):
        check_endmembers(M, names=["gv", "npv", "soil", "sand"])
    with pytest.warns(CollinearityWarning, match=r"row 1 and row 3"):
        estimate_fractions(rng.uniform(0, 1, (2, 6)), M)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        check_endmembers(make_endmembers(rng, 4, 6))  # well conditioned: silent


def test_input_errors():
    rng = np.random.default_rng(15)
    M = make_endmembers(rng, 3, 6)
    x = rng.uniform(0, 1, (4, 6))
    with pytest.raises(BandMismatchError, match="7 bands but the endmembers have 6"):
        estimate_fractions(rng.uniform(0, 1, (4, 7)), M)
    Mn = M.copy()
    Mn[1, 4] = np.nan
    with pytest.raises(InputError, match=r"'dry' \(row 1\) .* band 4"):
        check_endmembers(Mn, names=["gv", "dry", "soil"])
    with pytest.raises(InputError, match="row 1 .* band 4"):
        estimate_fractions(x, Mn)
    for bad in ([1, 1, 1, 0, 1, 1], [1, 1, np.inf, 1, 1, 1], [1, 1, -2, 1, 1, 1]):
        with pytest.raises(InputError, match="band 2|band 3"):
            estimate_fractions(x, M, weights=bad)
    with pytest.raises(ShapeError, match=r"\(6,\)"):
        estimate_fractions(x, M, weights=np.ones(5))
    with pytest.raises(UnknownNameError, match="'none', 'sum-to-one', 'non-negative', 'fcls'"):
        estimate_fractions(x, M, constraint="lasso")
    with pytest.raises(KeyError):
        estimate_fractions(x, M, constraint="lasso")
    with pytest.raises(ShapeError):
        estimate_fractions(x, M[0])
    with pytest.raises(ShapeError):
        check_endmembers(M, names=["a", "b"])
    with pytest.raises(ShapeError):
        kkt_residual(x, M, np.zeros((4, 2)))
