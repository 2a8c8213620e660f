"""Compiled kernel behind :func:`unmix.trend.pettitt` (private)."""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange


@njit(cache=True)
def _pettitt_one(r, y, x, pos, v, k_out, idx_out, p_out):
    nt = y.shape[1]
    m = 0
    for k in range(nt):
        val = y[r, k]
        if not math.isnan(val):
            x[m] = val
            pos[m] = k
            m += 1
    if m < 3:
        k_out[r] = np.nan
        idx_out[r] = np.nan
        p_out[r] = np.nan
        return
    # V_i = sum_j sgn(x_i - x_j) = (#smaller) - (#larger); U_t = V_1 + ... + V_t
    for i in range(m):
        xi = x[i]
        acc = 0
        for j in range(m):
            acc += (xi > x[j]) - (xi < x[j])
        v[i] = acc
    u = 0.0
    kmax = 0.0
    tbest = -1
    for t in range(m - 1):
        u += v[t]
        if abs(u) > kmax:
            kmax = abs(u)
            tbest = t
    mf = float(m)
    k_out[r] = kmax
    idx_out[r] = pos[tbest] if tbest >= 0 else np.nan
    p_out[r] = min(1.0, 2.0 * math.exp(-6.0 * kmax * kmax / (mf * mf * mf + mf * mf)))


@njit(cache=True, parallel=True)
def pettitt_batch(y, n_chunks, k_out, idx_out, p_out):
    ns, nt = y.shape
    for c in prange(n_chunks):
        x = np.empty(nt)
        pos = np.empty(nt, dtype=np.int64)
        v = np.empty(nt)
        for r in range(c * ns // n_chunks, (c + 1) * ns // n_chunks):
            _pettitt_one(r, y, x, pos, v, k_out, idx_out, p_out)
