"""Small dense solve shared by the compiled kernels of :mod:`unmix.solvers` and :mod:`unmix.mesma`.

Private. The function is inlined into its callers at numba IR level (``inline="always"``): called as
a function, the reference counting of its array argument costs more than the arithmetic on the
few-by-few systems of an active-set step, and inlined it is compiled with the caller's ``fastmath``
flags. numba's on-disk cache only watches the file a function is defined in: after editing this file,
delete the callers' cached ``__pycache__/*.nb*`` files (``unmix/solvers/``, ``unmix/mesma/``) so they
are recompiled.
"""

from __future__ import annotations

from numba import njit


@njit(cache=True, inline="always")
def gauss_solve(W, n, tiny):  # pragma: no cover - compiled
    """Solve the ``n x n`` system ``W[:n, :n] y = W[:n, n]`` in place; ``y`` ends in ``W[:n, n]``.

    Gaussian elimination with partial pivoting (Golub & Van Loan, Matrix Computations, 4th ed.,
    section 3.4; from memory). Returns False, leaving ``W`` partly reduced, as soon as the largest
    available pivot has magnitude ``<= tiny`` (a singular system); a negative ``tiny`` never stops.
    Entries left of the diagonal are not cleared (they are never read again).
    """
    for col in range(n):
        p = col
        best = abs(W[col, col])
        for r in range(col + 1, n):
            v = abs(W[r, col])
            if v > best:
                best = v
                p = r
        if best <= tiny:
            return False
        if p != col:
            for s in range(col, n + 1):
                t = W[col, s]
                W[col, s] = W[p, s]
                W[p, s] = t
        piv = W[col, col]
        for r in range(col + 1, n):
            f = W[r, col] / piv
            if f != 0.0:
                for s in range(col, n + 1):
                    W[r, s] -= f * W[col, s]
    for r in range(n - 1, -1, -1):
        s = W[r, n]
        for t in range(r + 1, n):
            s -= W[r, t] * W[t, n]
        W[r, n] = s / W[r, r]
    return True
