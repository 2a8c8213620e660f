"""Compiled kernel behind :func:`unmix.trend.seasonal_kendall` (private)."""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from ._kendall_numba import _mk_s, _normal_two_sided_p, _var_s, _z_cc


@njit(cache=True)
def _seasonal_kendall_one(r, y, codes, n_seasons, x, sbuf, dummy, s_out, var_out, z_out, p_out,
                          tau_out, n_out):
    nt = y.shape[1]
    s_tot = 0.0
    v_tot = 0.0
    pairs = 0.0
    m_tot = 0
    for g in range(n_seasons):
        m = 0
        for k in range(nt):
            if codes[k] == g:
                v = y[r, k]
                if not math.isnan(v):
                    x[m] = v
                    m += 1
        m_tot += m
        if m < 2:
            continue
        s_tot += _mk_s(x, m, dummy, False, 0.0)
        vg, _ = _var_s(x, m, dummy, False, sbuf, 0.0)
        v_tot += vg
        pairs += 0.5 * m * (m - 1.0)
    n_out[r] = m_tot
    if m_tot < 3 or pairs == 0.0:
        s_out[r] = np.nan
        var_out[r] = np.nan
        z_out[r] = np.nan
        p_out[r] = np.nan
        tau_out[r] = np.nan
        return
    s_out[r] = s_tot
    var_out[r] = v_tot
    tau_out[r] = s_tot / pairs
    if v_tot > 0.0:
        z = _z_cc(s_tot, v_tot)
        z_out[r] = z
        p_out[r] = _normal_two_sided_p(z)
    else:
        z_out[r] = 0.0
        p_out[r] = 1.0


@njit(cache=True, parallel=True)
def seasonal_kendall_batch(y, codes, n_seasons, n_chunks, s_out, var_out, z_out, p_out, tau_out,
                           n_out):
    ns, nt = y.shape
    for c in prange(n_chunks):
        x = np.empty(nt)
        sbuf = np.empty(nt)
        dummy = np.empty(0, dtype=np.int64)
        for r in range(c * ns // n_chunks, (c + 1) * ns // n_chunks):
            _seasonal_kendall_one(r, y, codes, n_seasons, x, sbuf, dummy, s_out, var_out, z_out,
                                  p_out, tau_out, n_out)
