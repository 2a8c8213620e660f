"""Compiled selection loops of :mod:`unmix.mesma` (private): every candidate model of every pixel,
the choice by the selection rule of :mod:`unmix.mesma.selection`, and the all-models diagnostic.

The per-model solves they call live in :mod:`unmix.mesma._solve_numba`. numba's on-disk cache only
watches the file a function is defined in: after editing ``_solve_numba.py``, delete the cached
``__pycache__/_select_numba*.nb*`` files (or touch this file) so the loops here are recompiled.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from ._solve_numba import (
    _drops_a_class,
    _fcls_active_set,
    _pixel_products,
    _plain_products,
    _rss,
    _solve_one,
    _sum_to_one,
    _within_bounds,
)

_CHUNK = 256  # pixels per parallel task and per SIMD loop of the selection kernel


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
