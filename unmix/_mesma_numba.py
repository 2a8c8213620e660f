"""Compiled inner loops of :mod:`unmix.mesma` (private).

Everything here works on one pixel's band products with the pool of endmembers,
``b = E_w x_w`` and ``xx = x_w . x_w`` (``_w``: bands scaled by the square root of the band
weights). Each candidate model's least-squares problem depends on the pixel only through the
``q`` entries of ``b`` it uses and on ``xx``, so the cost per model is O(q^2), whatever the band
count (O(q) for the rss at the sum-to-one optimum). Arithmetic is float64 throughout; outputs
are written into arrays of the caller's dtype.

Model tables (built in :mod:`unmix.mesma`):

``idx``  (n_models, qmax) int32   pool index of each model column (shade, when present, last)
``nq``   (n_models,) int32        number of columns of each model
``A``    (n_models, qmax+1, qmax) sum-to-one solution operator on ``b``: rows ``0..q-1`` give
                                  ``a = A b_M + c``, row ``q`` the multiplier ``lam``
``c``    (n_models, qmax+1)
``size_start`` (n_sizes + 1,)     models are sorted by number of classes; offsets of each size
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

_CHUNK = 256  # pixels per parallel task and per SIMD loop of the selection kernel


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

    Gaussian elimination with partial pivoting, in place; the solution ends in ``W[:n, n]``.
    Returns False when a pivot vanishes (a singular face of the simplex).
    """
    scale = 0.0
    for r in range(n):
        for s in range(n):
            v = abs(W[r, s])
            if v > scale:
                scale = v
    tiny = 1e-13 * scale if scale > 0.0 else 1e-300
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


@njit(cache=True)
def _flush(pend_m, pend_p, pend_r, n_pend, idx, nq, A, c, GE, Bt, xxv, has_shade, lo, hi,
           max_shade, best_r, best_m, bm, a, free, fidx, W):
    """Solve the deferred (model, pixel) pairs by active set unless their rss bound rules them out."""
    for e in range(n_pend):
        m = pend_m[e]
        p = pend_p[e]
        if pend_r[e] > best_r[p] or (best_m[p] >= 0 and pend_r[e] >= best_r[p]):
            continue
        q = nq[m]
        b = Bt[:, p]
        _sum_to_one(m, q, idx, A, c, b, bm, a)
        _fcls_active_set(m, q, idx, GE, b, a, free, fidx, W)
        if _drops_a_class(a, q, has_shade):
            continue
        if not _within_bounds(a, q, has_shade, lo, hi, max_shade):
            continue
        r = _rss(m, q, idx, GE, b, xxv[p], a)
        if r > best_r[p] or (best_m[p] >= 0 and r >= best_r[p]):
            continue
        best_r[p] = r
        best_m[p] = m


@njit(cache=True, parallel=True)
def mesma_select(X, sw, Ew, GE, E, GEu, weighted, idx, nq, A, c, size_start, pool_slot,
                 pool_mem, n_classes, has_shade, fcls, max_rss, lo, hi, max_shade, gain,
                 frac_out, mem_out, rmse_out, unmod_out):
    """Evaluate the candidate models of every pixel and write the selected one.

    ``X`` (n_pix, n_bands); ``frac_out`` (n_pix, n_out) zero-filled; ``mem_out``
    (n_pix, n_classes) filled with -1; ``rmse_out`` (n_pix,); ``unmod_out`` (n_pix,) False.
    ``Ew``/``GE``: weighted pool and its Gram matrix (the fit); ``E``/``GEu``: unweighted ones
    (the rmse; the same arrays when ``weighted`` is False). ``pool_slot``: output column of each
    pool endmember (class index, or n_classes for shade); ``pool_mem``: member index within its
    class (-1 for shade).

    Pixels are processed in blocks, models in the outer loop and the block's pixels in the
    inner loop, so that the sum-to-one solution and its O(q) rss run as SIMD loops over pixels.
    Selection: within a model size the lowest rss among accepted models; a larger size replaces
    the current choice only when its rmse (recomputed with the full quadratic form) is lower by
    more than ``gain``; a block stops once every pixel's rmse is <= ``gain``.
    """
    n_pix = X.shape[0]
    n_bands = X.shape[1]
    n_end = Ew.shape[0]
    qmax = idx.shape[1]
    n_sizes = size_start.shape[0] - 1
    P = _CHUNK
    n_chunks = (n_pix + P - 1) // P
    for ci in prange(n_chunks):
        p0 = ci * P
        npx = min(P, n_pix - p0)
        xw = np.empty(n_bands)
        bcol = np.empty(n_end)
        bucol = np.empty(n_end)
        Bt = np.zeros((n_end, P))
        But = np.zeros((n_end, P))
        xxv = np.zeros(P)
        xxuv = np.zeros(P)
        valid = np.zeros(P, dtype=np.bool_)
        T = np.empty((qmax + 1, P))
        R = np.empty(P)
        best_r = np.empty(P)
        best_m = np.empty(P, dtype=np.int64)
        sel_m = np.full(P, -1, dtype=np.int64)
        sel_rm = np.full(P, np.inf)
        a = np.empty(qmax)
        bm = np.empty(qmax)
        free = np.empty(qmax, dtype=np.bool_)
        fidx = np.empty(qmax, dtype=np.int64)
        W = np.empty((qmax + 1, qmax + 2))
        pend_m = np.empty(16 * P, dtype=np.int64)
        pend_p = np.empty(16 * P, dtype=np.int64)
        pend_r = np.empty(16 * P)
        n_pend = 0
        n_valid = 0
        for p in range(npx):
            xx = _pixel_products(X[p0 + p], sw, Ew, xw, bcol)
            if xx != xx:
                continue
            valid[p] = True
            n_valid += 1
            xxv[p] = xx
            for k in range(n_end):
                Bt[k, p] = bcol[k]
            if weighted:
                xxuv[p] = _plain_products(X[p0 + p], E, bucol)
                for k in range(n_end):
                    But[k, p] = bucol[k]
        for s in range(n_sizes):
            if n_valid == 0:
                break
            for p in range(npx):
                best_r[p] = max_rss
                best_m[p] = -1
            for m in range(size_start[s], size_start[s + 1]):
                q = nq[m]
                # sum-to-one fractions (rows 0..q-1) and multiplier (row q), SIMD over pixels
                for k in range(q + 1):
                    c0 = c[m, k]
                    for p in range(npx):
                        T[k, p] = c0
                    for l in range(q):
                        coef = A[m, k, l]
                        il = idx[m, l]
                        for p in range(npx):
                            T[k, p] += coef * Bt[il, p]
                # rss at the sum-to-one optimum, xx - a.b_M - lam (G a + lam 1 = b_M there, so
                # a.G a = a.b_M - lam): O(q), but first-order sensitive to rounding in a, so it
                # only ranks models within a size; rmse values compared across sizes and
                # reported come from the full quadratic form (_rss)
                for p in range(npx):
                    R[p] = xxv[p] - T[q, p]
                for k in range(q):
                    il = idx[m, k]
                    for p in range(npx):
                        R[p] -= T[k, p] * Bt[il, p]
                for p in range(npx):
                    if not valid[p]:
                        continue
                    r = R[p]
                    if not weighted and (r > best_r[p] or (best_m[p] >= 0 and r >= best_r[p])):
                        continue  # bounded (fcls) optimum can only be worse: prune too
                    neg = False
                    for k in range(q):
                        a[k] = T[k, p]
                        if a[k] < 0.0:
                            neg = True
                    if fcls and neg:
                        if not weighted:
                            # defer: a model whose sum-to-one solution is already feasible
                            # may lower best_r first and spare this active-set solve
                            if n_pend == pend_m.shape[0]:
                                _flush(pend_m, pend_p, pend_r, n_pend, idx, nq, A, c, GE, Bt, xxv,
                                       has_shade, lo, hi, max_shade, best_r, best_m, bm, a, free,
                                       fidx, W)
                                n_pend = 0
                            pend_m[n_pend] = m
                            pend_p[n_pend] = p
                            pend_r[n_pend] = r
                            n_pend += 1
                            continue
                        _fcls_active_set(m, q, idx, GE, Bt[:, p], a, free, fidx, W)
                        if _drops_a_class(a, q, has_shade):
                            continue
                    if not _within_bounds(a, q, has_shade, lo, hi, max_shade):
                        continue
                    if weighted:
                        r = _rss(m, q, idx, GEu, But[:, p], xxuv[p], a)
                    if r > best_r[p] or (best_m[p] >= 0 and r >= best_r[p]):
                        continue
                    best_r[p] = r
                    best_m[p] = m
            if n_pend:
                _flush(pend_m, pend_p, pend_r, n_pend, idx, nq, A, c, GE, Bt, xxv, has_shade, lo,
                       hi, max_shade, best_r, best_m, bm, a, free, fidx, W)
                n_pend = 0
            # compare the size's best with the current choice (full quadratic form)
            n_done = 0
            for p in range(npx):
                if not valid[p]:
                    n_done += 1
                    continue
                m = best_m[p]
                if m >= 0:
                    q = nq[m]
                    _solve_one(m, q, idx, A, c, GE, Bt[:, p], fcls, bm, a, free, fidx, W)
                    if weighted:
                        rr = _rss(m, q, idx, GEu, But[:, p], xxuv[p], a)
                    else:
                        rr = _rss(m, q, idx, GE, Bt[:, p], xxv[p], a)
                    rm = np.sqrt(rr / n_bands)
                    if sel_m[p] < 0 or rm < sel_rm[p] - gain:
                        sel_m[p] = m
                        sel_rm[p] = rm
                if sel_m[p] >= 0 and sel_rm[p] <= gain:
                    n_done += 1
            if n_done == npx:
                break
        for p in range(npx):
            i = p0 + p
            if not valid[p]:
                for k in range(frac_out.shape[1]):
                    frac_out[i, k] = np.nan
                rmse_out[i] = np.nan
                continue
            m = sel_m[p]
            if m < 0:
                for k in range(frac_out.shape[1]):
                    frac_out[i, k] = np.nan
                rmse_out[i] = np.nan
                unmod_out[i] = True
                continue
            q = nq[m]
            _solve_one(m, q, idx, A, c, GE, Bt[:, p], fcls, bm, a, free, fidx, W)
            for k in range(q):
                pe = idx[m, k]
                slot = pool_slot[pe]
                frac_out[i, slot] = a[k]
                if slot < n_classes:
                    mem_out[i, slot] = pool_mem[pe]
            rmse_out[i] = sel_rm[p]


@njit(cache=True, parallel=True)
def mesma_all_models(X, sw, Ew, GE, E, GEu, weighted, idx, nq, A, c, pool_slot, fcls,
                     frac_out, rmse_out):
    """Fractions and rmse of every candidate model for every pixel (diagnostics and tests).

    ``frac_out`` (n_pix, n_models, n_out) zero-filled; ``rmse_out`` (n_pix, n_models).
    """
    n_pix = X.shape[0]
    n_bands = X.shape[1]
    n_end = Ew.shape[0]
    n_models = idx.shape[0]
    qmax = idx.shape[1]
    n_chunks = (n_pix + _CHUNK - 1) // _CHUNK
    for ci in prange(n_chunks):
        xw = np.empty(n_bands)
        b = np.empty(n_end)
        bu = np.empty(n_end)
        a = np.empty(qmax)
        bm = np.empty(qmax)
        free = np.empty(qmax, dtype=np.bool_)
        fidx = np.empty(qmax, dtype=np.int64)
        W = np.empty((qmax + 1, qmax + 2))
        stop = min(n_pix, (ci + 1) * _CHUNK)
        for i in range(ci * _CHUNK, stop):
            xx = _pixel_products(X[i], sw, Ew, xw, b)
            if xx != xx:
                for m in range(n_models):
                    rmse_out[i, m] = np.nan
                    for k in range(frac_out.shape[2]):
                        frac_out[i, m, k] = np.nan
                continue
            if weighted:
                xxu = _plain_products(X[i], E, bu)
            else:
                xxu = xx
                for k in range(n_end):
                    bu[k] = b[k]
            for m in range(n_models):
                q = nq[m]
                _sum_to_one(m, q, idx, A, c, b, bm, a)
                if fcls:
                    _fcls_active_set(m, q, idx, GE, b, a, free, fidx, W)
                r = _rss(m, q, idx, GEu, bu, xxu, a)
                rmse_out[i, m] = np.sqrt(r / n_bands)
                for k in range(q):
                    frac_out[i, m, pool_slot[idx[m, k]]] = a[k]
