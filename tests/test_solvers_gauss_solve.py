"""Tests of the shared dense solve (unmix._gauss_numba.gauss_solve) used by the solver kernels.

References used: numpy.linalg.solve (LAPACK gesv).
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 100_000), n=st.integers(1, 12), bordered=st.booleans())
def test_shared_dense_solve_matches_numpy(seed, n, bordered):
    # unmix._gauss_numba.gauss_solve (shared by the FCLS and MESMA kernels) against numpy.linalg.solve
    # (LAPACK gesv) on random SPD systems, plain or bordered by the sum-to-one row/column as in FCLS.
    from unmix._gauss_numba import gauss_solve

    rng = np.random.default_rng(seed)
    B = rng.normal(size=(n + 3, n))
    K = B.T @ B + 0.1 * np.eye(n)
    if bordered:
        K = np.block([[K, np.ones((n, 1))], [np.ones((1, n)), np.zeros((1, 1))]])
    m = K.shape[0]
    rhs = rng.normal(size=m)
    W = np.zeros((m + 2, m + 3))  # larger scratch, as in the kernels
    W[:m, :m] = K
    W[:m, m] = rhs
    assert gauss_solve(W, m, -1.0)
    np.testing.assert_allclose(W[:m, m], np.linalg.solve(K, rhs), rtol=1e-9, atol=1e-9)


def test_shared_dense_solve_reports_a_singular_system():
    # Two equal rows: elimination leaves a zero pivot, which a non-negative ``tiny`` reports (MESMA's use).
    from unmix._gauss_numba import gauss_solve

    W = np.array([[1.0, 2.0, 3.0, 1.0], [1.0, 2.0, 3.0, 2.0], [0.0, 1.0, 4.0, 3.0]])
    assert not gauss_solve(W.copy(), 3, 1e-13 * 4.0)
