"""Compiled per-pixel loop behind :func:`unmix.solvers.estimate_fractions` (see :mod:`unmix.solvers.fcls`).

Private module: the public entry point validates its inputs and prepares the operators; the code here
trusts them. Every pixel is reduced to the ``n_endmembers``-sized normal equations of its problem

    minimise 1/2 a^T G a - b^T a,   G = M W M^T / s,   b = M W x / s

(``s`` a positive scale so that ``G`` is of order one), which no longer depends on the band count. The
unconstrained and sum-to-one problems have closed forms, applied as a precomputed linear operator
``a = L x + q``. Under the non-negativity constraint (with or without sum-to-one) that same closed form
is tried first; if a fraction comes out negative, a primal active-set method in the manner of Lawson &
Hanson (1974), extended with the equality constraint and warm-started by iterative removal of negative
fractions, finds the exact optimum. Its subproblems (the equality-constrained least squares
restricted to a support) are solved either by looking up the precomputed solution operator of the
support (``use_table``) or by a small dense solve (:func:`unmix._gauss_numba.gauss_solve`, shared with
the MESMA kernel).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .._gauss_numba import gauss_solve

MODE_NONE = 0
MODE_SUM_TO_ONE = 1
MODE_NON_NEGATIVE = 2
MODE_FCLS = 3

# Relative tolerance on the reduced gradient under which no index is worth adding to the support.
# About 5000 float64 ulps of the gradient's natural scale; see _active_set.
_GRAD_RTOL = 1e-12

# Let LLVM reorder and fuse sums (vectorised dot products); NaN/inf semantics are kept, because the
# no-data test relies on them.
_FASTMATH = {"reassoc", "contract", "nsz"}


@njit(cache=True, inline="always", fastmath=_FASTMATH)
def _subproblem(insup, eq, G, b, Ptab, qtab, use_table, idx, K, z):
    """Optimum ``z`` of the (equality-constrained if ``eq``) problem restricted to the support.

    Entries of ``z`` outside the support are left untouched. Returns the support size.
    """
    p = G.shape[0]
    k = 0
    mask = 0
    for j in range(p):
        if insup[j]:
            idx[k] = j
            k += 1
            mask |= 1 << j
    if use_table:
        for r in range(k):
            s = qtab[mask, r]
            for c in range(k):
                s += Ptab[mask, r, c] * b[idx[c]]
            z[idx[r]] = s
    else:
        # augmented system in K (m rows, right-hand side in column m), bordered under sum-to-one
        m = k + 1 if eq else k
        for r in range(k):
            for c in range(k):
                K[r, c] = G[idx[r], idx[c]]
            K[r, m] = b[idx[r]]
        if eq:
            for r in range(k):
                K[r, k] = 1.0
                K[k, r] = 1.0
            K[k, k] = 0.0
            K[k, m] = 1.0
        gauss_solve(K, m, -1.0)
        for r in range(k):
            z[idx[r]] = K[r, m]
    return k


@njit(cache=True, inline="always", fastmath=_FASTMATH)
def _active_set(G, gmax, b, eq, Ptab, qtab, use_table, a0, a, z, g, insup, idx, K):
    """Exact minimiser of 1/2 a^T G a - b^T a over a >= 0 (and sum(a) = 1 if ``eq``), into ``a``.

    Primal active-set method (the NNLS algorithm of Lawson & Hanson 1974, ch. 23 from memory, extended
    with the equality constraint): start at a feasible point that is optimal on its support (see the
    warm start below), add the index whose multiplier is most negative, solve the subproblem on the
    enlarged support, step back along the segment to stay feasible and drop indices that reach zero.
    The objective decreases strictly at every outer step and the support determines the iterate, so
    the method ends after finitely many steps at a point that satisfies the KKT conditions.
    Returns the number of outer iterations.
    """
    p = G.shape[0]
    bmax = 0.0
    for j in range(p):
        insup[j] = False
        a[j] = 0.0
        bj = abs(b[j])
        if bj > bmax:
            bmax = bj
    # Warm start: drop the indices that are negative in the closed-form solution ``a0`` and re-solve
    # on the rest until all are positive (a common heuristic, not optimal on its own). The result is
    # feasible and optimal on its support, hence a valid start; the active-set loop below then makes
    # it exact. If the removal empties the support, start from a vertex (or the origin) instead.
    nsup = 0
    for j in range(p):
        if a0[j] > 0.0:
            insup[j] = True
            nsup += 1
    ok = False
    for _it in range(p):
        if nsup == 0:
            break
        k = _subproblem(insup, eq, G, b, Ptab, qtab, use_table, idx, K, z)
        clean = True
        for r in range(k):
            j = idx[r]
            if z[j] <= 0.0:
                insup[j] = False
                nsup -= 1
                clean = False
        if clean:
            for r in range(k):
                a[idx[r]] = z[idx[r]]
            ok = True
            break
    if not ok:
        for j in range(p):
            insup[j] = False
            a[j] = 0.0
        if eq:
            best = 0
            fbest = 0.5 * G[0, 0] - b[0]
            for j in range(1, p):
                f = 0.5 * G[j, j] - b[j]
                if f < fbest:
                    fbest = f
                    best = j
            a[best] = 1.0
            insup[best] = True

    n_outer = 0
    for _outer in range(3 * p + 10):
        n_outer += 1
        # gradient g = G a - b and, under sum-to-one, its common value on the support (-multiplier)
        asum = 0.0
        for j in range(p):  # a is zero off the support
            s = -b[j]
            for l in range(p):
                s += G[j, l] * a[l]
            g[j] = s
            asum += abs(a[j])
        gs = 0.0
        if eq:
            ns = 0
            for j in range(p):
                if insup[j]:
                    gs += g[j]
                    ns += 1
            gs /= ns
        tol = _GRAD_RTOL * (gmax * (asum + 1.0) + bmax)
        enter = -1
        wbest = tol
        for j in range(p):
            if not insup[j]:
                w = gs - g[j]
                if w > wbest:
                    wbest = w
                    enter = j
        if enter < 0:
            break
        insup[enter] = True
        stalled = False
        for inner in range(p + 2):
            k = _subproblem(insup, eq, G, b, Ptab, qtab, use_table, idx, K, z)
            if inner == 0 and z[enter] <= 0.0:
                # the multiplier was negative only by rounding: the current point is optimal
                insup[enter] = False
                stalled = True
                break
            alpha = 1.0
            blocking = -1
            for r in range(k):
                j = idx[r]
                if z[j] <= 0.0:
                    t = a[j] / (a[j] - z[j])
                    if t < alpha:
                        alpha = t
                        blocking = j
            if blocking < 0:
                for r in range(k):
                    a[idx[r]] = z[idx[r]]
                break
            for r in range(k):
                j = idx[r]
                a[j] += alpha * (z[j] - a[j])
            a[blocking] = 0.0
            insup[blocking] = False
            for r in range(k):
                j = idx[r]
                if insup[j] and a[j] <= 0.0:
                    a[j] = 0.0
                    insup[j] = False
        if stalled:
            break
    for j in range(p):
        if not insup[j]:
            a[j] = 0.0
    return n_outer


@njit(cache=True, inline="always")
def _on_simplex(a, p):
    """True when ``a`` is non-negative and sums to one to within rounding (1e-9)."""
    s = 0.0
    for j in range(p):
        if not a[j] >= 0.0:  # also catches NaN
            return False
        s += a[j]
    return abs(s - 1.0) <= 1e-9


@njit(cache=True, inline="always")
def _nearest_vertex(xs, M, a, p, nb):
    """Put in ``a`` the vertex of the simplex (one endmember, fraction 1) closest to ``xs``.

    Fallback for inputs whose magnitude is beyond what the closed forms resolve in float64
    (|x| of order 1e6 and more, e.g. an undeclared fill value of 1e30): there the rounding of
    ``L x`` is larger than the fractions themselves. For |x| -> inf the FCLS optimum tends to the
    vertex that maximises m_k . x, which the nearest vertex is for such inputs; the result stays
    on the simplex exactly.
    """
    # argmin_k |x - m_k|^2 = argmax_k (m_k . x - |m_k|^2 / 2), without |x|^2, which swamps the
    # differences between vertices in float64 for such inputs
    best = 0
    best_s = -np.inf
    for j in range(p):
        s = 0.0
        for k in range(nb):
            s += M[j, k] * (xs[k] - 0.5 * M[j, k])
        if s > best_s:
            best_s = s
            best = j
    for j in range(p):
        a[j] = 0.0
    a[best] = 1.0


@njit(cache=True, parallel=True, fastmath=_FASTMATH)
def unmix_pixels(x, M, L, q, MWs, Pb, qb, via_b, G, Ptab, qtab, use_table, mode, frac, rmse, block):
    """Fractions and RMSE for every row of ``x`` (n_pixels, n_bands), written into ``frac``/``rmse``.

    ``M`` (p, n_bands) endmembers; ``L`` (p, n_bands), ``q`` (p,) the closed-form
    operator of the unconstrained (modes 0, 2) or sum-to-one (modes 1, 3) problem on the full
    support; ``MWs`` (p, n_bands) so that b = MWs x; ``Pb`` (p, p), ``qb`` (p,) the same closed form
    as a function of b, used instead of ``L`` if ``via_b``; ``G`` (p, p) the scaled Gram matrix; ``Ptab``
    (2**p, p, p), ``qtab`` (2**p, p) per-support solution operators (if ``use_table``). A pixel with a
    non-finite band gets NaN everywhere. Work units of ``block`` pixels are shared among threads;
    the helpers are inlined (``inline="always"``): called as functions, the reference counting of
    their array arguments costs more than the arithmetic.
    """
    n, nb = x.shape
    p = M.shape[0]
    eq = mode == MODE_FCLS
    gmax = 0.0
    for j in range(p):
        for l in range(p):
            gmax = max(gmax, abs(G[j, l]))
    nblocks = (n + block - 1) // block
    for ib in prange(nblocks):
        xs = np.empty(nb)
        res = np.empty(nb)
        a = np.empty(p)
        a0 = np.empty(p)
        z = np.empty(p)
        g = np.empty(p)
        bvec = np.empty(p)
        insup = np.zeros(p, dtype=np.bool_)
        idx = np.empty(p, dtype=np.int64)
        K = np.empty((p + 1, p + 2))  # augmented: right-hand side in the column after the system
        start = ib * block
        stop = min(n, start + block)
        for i in range(start, stop):
            tot = 0.0
            for k in range(nb):
                v = np.float64(x[i, k])
                xs[k] = v
                tot += v * 0.0  # NaN or inf anywhere makes this NaN (vectorisable test)
            if tot != 0.0:
                for j in range(p):
                    frac[i, j] = np.nan
                rmse[i] = np.nan
                continue
            # closed form on the full support: from x (a = L x + q), or, with many bands under a
            # non-negativity constraint, from b = MWs x (a = P b + qb), b being needed anyway if the
            # active set has to run
            feasible = True
            if via_b:
                for j in range(p):
                    s = 0.0
                    for k in range(nb):
                        s += MWs[j, k] * xs[k]
                    bvec[j] = s
                for j in range(p):
                    s = qb[j]
                    for l in range(p):
                        s += Pb[j, l] * bvec[l]
                    a[j] = s
                    if s < 0.0:
                        feasible = False
            else:
                for j in range(p):
                    s = q[j]
                    for k in range(nb):
                        s += L[j, k] * xs[k]
                    a[j] = s
                    if s < 0.0:
                        feasible = False
            if mode >= MODE_NON_NEGATIVE and not feasible:
                if not via_b:
                    for j in range(p):
                        s = 0.0
                        for k in range(nb):
                            s += MWs[j, k] * xs[k]
                        bvec[j] = s
                for j in range(p):
                    a0[j] = a[j]
                _active_set(G, gmax, bvec, eq, Ptab, qtab, use_table, a0, a, z, g, insup, idx, K)
            if mode == MODE_FCLS:
                if not _on_simplex(a, p):
                    _nearest_vertex(xs, M, a, p, nb)
                for j in range(p):  # a lone support member can come out 1 + 1 ulp
                    if a[j] > 1.0:
                        a[j] = 1.0
            # residual from x - M^T a directly (not from the expanded quadratic: no cancellation)
            for k in range(nb):
                res[k] = xs[k]
            for j in range(p):
                aj = a[j]
                for k in range(nb):
                    res[k] -= M[j, k] * aj
            ss = 0.0
            for k in range(nb):
                ss += res[k] * res[k]
            rmse[i] = np.sqrt(ss / nb)
            for j in range(p):
                frac[i, j] = a[j]
