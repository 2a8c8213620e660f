"""Compiled per-model least squares of :mod:`unmix.mesma` (private): band products of a pixel,
the sum-to-one solution from the precomputed operator, its residual, and the non-negative
(fcls) active set. The selection loops that call these are in :mod:`unmix.mesma._select_numba`.

Everything here works on one pixel's band products with the pool of endmembers,
``b = E_w x_w`` and ``xx = x_w . x_w`` (``_w``: bands scaled by the square root of the band
weights). Each candidate model's least-squares problem depends on the pixel only through the
``q`` entries of ``b`` it uses and on ``xx``, so the cost per model is O(q^2), whatever the band
count (O(q) for the rss at the sum-to-one optimum). Arithmetic is float64 throughout; outputs
are written into arrays of the caller's dtype.

Model tables (built in :mod:`unmix.mesma.models`):

``idx``  (n_models, qmax) int32   pool index of each model column (shade, when present, last)
``nq``   (n_models,) int32        number of columns of each model
``A``    (n_models, qmax+1, qmax) sum-to-one solution operator on ``b``: rows ``0..q-1`` give
                                  ``a = A b_M + c``, row ``q`` the multiplier ``lam``
``c``    (n_models, qmax+1)
``size_start`` (n_sizes + 1,)     models are sorted by number of classes; offsets of each size
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .._gauss_numba import gauss_solve


@njit(cache=True)
def _pixel_products(x, sw, Ew, xw, b):
    """Fill ``b = Ew @ (x * sw)``; return ``|x * sw|^2``, or NaN when a band is NaN."""
    n_bands = x.shape[0]
    xx = 0.0
    for j in range(n_bands):
        v = np.float64(x[j])
        if v != v or abs(v) == np.inf:
            return np.nan
        v = v * sw[j]
        xw[j] = v
        xx += v * v
    for k in range(Ew.shape[0]):
        s = 0.0
        for j in range(n_bands):
            s += Ew[k, j] * xw[j]
        b[k] = s
    return xx


@njit(cache=True)
def _plain_products(x, E, bu):
    """Unweighted ``bu = E @ x`` and ``|x|^2`` (for the rmse when band weights are used)."""
    n_bands = x.shape[0]
    xx = 0.0
    for j in range(n_bands):
        v = np.float64(x[j])
        xx += v * v
    for k in range(E.shape[0]):
        s = 0.0
        for j in range(n_bands):
            s += E[k, j] * np.float64(x[j])
        bu[k] = s
    return xx


@njit(cache=True)
def _sum_to_one(m, q, idx, A, c, b, bm, a):
    """Sum-to-one least-squares fractions of model ``m`` from the precomputed operator.

    Gathers the model's entries of ``b`` into ``bm``, fills ``a[:q]`` and returns the Lagrange
    multiplier ``lam`` of the sum-to-one constraint (``G a + lam 1 = b_M``).
    """
    for l in range(q):
        bm[l] = b[idx[m, l]]
    lam = 0.0
    for k in range(q + 1):
        s = c[m, k]
        for l in range(q):
            s += A[m, k, l] * bm[l]
        if k < q:
            a[k] = s
        else:
            lam = s
    return lam


@njit(cache=True)
def _rss(m, q, idx, GE, b, xx, a):
    """Weighted residual sum of squares ``|x - M a|^2 = xx - 2 a.b + a.G a`` (clipped at 0).

    Written as the full quadratic form (not ``xx - a.b - lambda``): at the constrained optimum it
    is stationary along the constraint, so rounding in ``a`` enters only to second order.
    """
    s = xx
    for k in range(q):
        ik = idx[m, k]
        t = 0.0
        for l in range(q):
            t += GE[ik, idx[m, l]] * a[l]
        s += a[k] * (t - 2.0 * b[ik])
    return s if s > 0.0 else 0.0


@njit(cache=True)
def _within_bounds(a, q, has_shade, lo, hi, max_shade):
    nc = q - 1 if has_shade else q
    for k in range(nc):
        if a[k] < lo or a[k] > hi:
            return False
    if has_shade:
        if a[q - 1] < lo or a[q - 1] > max_shade:
            return False
    return True


@njit(cache=True)
def _drops_a_class(a, q, has_shade):
    """True when a class fraction is exactly 0 (an active bound of the fcls solution): the fit is
    then the one of the smaller model without that class, which is a candidate of its own."""
    nc = q - 1 if has_shade else q
    for k in range(nc):
        if a[k] <= 0.0:
            return True
    return False


@njit(cache=True)
def _gauss_solve(W, n):
    """Solve the ``n x n`` system held in ``W[:n, :n]`` with right-hand side ``W[:n, n]``.

    Gaussian elimination with partial pivoting, in place (:func:`unmix._gauss_numba.gauss_solve`,
    shared with the plain unmixing kernel); the solution ends in ``W[:n, n]``. Returns False when a
    pivot vanishes (below 1e-13 of the largest entry: a singular face of the simplex).
    """
    scale = 0.0
    for r in range(n):
        for s in range(n):
            v = abs(W[r, s])
            if v > scale:
                scale = v
    tiny = 1e-13 * scale if scale > 0.0 else 1e-300
    return gauss_solve(W, n, tiny)


@njit(cache=True)
def _fcls_active_set(m, q, idx, GE, b, a, free, fidx, W):
    """Non-negative, sum-to-one least squares of model ``m`` by a primal active-set method.

    ``a`` holds the sum-to-one solution on entry; if it is non-negative it is already the
    answer. Otherwise start from the best single endmember (a feasible vertex), solve the
    equality-constrained problem on the free set through its bordered KKT system
    ``[[G_FF, 1], [1', 0]] [a_F; lam] = [b_F; 1]`` (non-singular even with a zero shade
    spectrum), step back to feasibility when needed, and free the bound with the most negative
    multiplier ``mu_i = (G a - b)_i + lam`` until none is negative (Nocedal & Wright 2006,
    algorithm 16.3). Returns False when ``a`` was left as it came in.
    """
    feasible = True
    for k in range(q):
        if a[k] < 0.0:
            feasible = False
            break
    if feasible:
        return False
    gscale = 0.0
    best = 0
    bestv = np.inf
    for k in range(q):
        ik = idx[m, k]
        g = GE[ik, ik]
        if g > gscale:
            gscale = g
        v = 0.5 * g - b[ik]
        if v < bestv:
            bestv = v
            best = k
    tol = 1e-11 * (gscale + 1e-300)
    for k in range(q):
        a[k] = 0.0
        free[k] = False
    a[best] = 1.0
    free[best] = True
    for _it in range(5 * q + 10):
        nf = 0
        for k in range(q):
            if free[k]:
                fidx[nf] = k
                nf += 1
        for r in range(nf):
            ir = idx[m, fidx[r]]
            for s in range(nf):
                W[r, s] = GE[ir, idx[m, fidx[s]]]
            W[r, nf] = 1.0
            W[r, nf + 1] = b[ir]
        for s in range(nf):
            W[nf, s] = 1.0
        W[nf, nf] = 0.0
        W[nf, nf + 1] = 1.0
        if not _gauss_solve(W, nf + 1):
            return True  # keep the current feasible point
        lam = W[nf, nf + 1]
        all_pos = True
        for r in range(nf):
            if W[r, nf + 1] < 0.0:
                all_pos = False
                break
        if all_pos:
            for r in range(nf):
                a[fidx[r]] = W[r, nf + 1]
            worst = -1
            worst_mu = -tol
            for k in range(q):
                if free[k]:
                    continue
                ik = idx[m, k]
                g = 0.0
                for l in range(q):
                    g += GE[ik, idx[m, l]] * a[l]
                mu = g - b[ik] + lam
                if mu < worst_mu:
                    worst_mu = mu
                    worst = k
            if worst < 0:
                return True
            free[worst] = True
        else:
            t = 1.0
            blk = -1
            for r in range(nf):
                k = fidx[r]
                z = W[r, nf + 1]
                if z < 0.0:
                    tr = a[k] / (a[k] - z)
                    if tr < t:
                        t = tr
                        blk = k
            for r in range(nf):
                k = fidx[r]
                a[k] += t * (W[r, nf + 1] - a[k])
            if blk >= 0:
                a[blk] = 0.0
                free[blk] = False
            for r in range(nf):
                k = fidx[r]
                if free[k] and a[k] <= 0.0:
                    a[k] = 0.0
                    free[k] = False
    return True


@njit(cache=True)
def _solve_one(m, q, idx, A, c, GE, b, fcls, bm, a, free, fidx, W):
    """Fractions of model ``m`` for one pixel (sum-to-one, then the active set when ``fcls``)."""
    _sum_to_one(m, q, idx, A, c, b, bm, a)
    if fcls:
        _fcls_active_set(m, q, idx, GE, b, a, free, fidx, W)
