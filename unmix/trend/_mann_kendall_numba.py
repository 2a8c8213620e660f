"""Compiled Mann-Kendall test with its serial-correlation corrections, behind
:func:`unmix.trend.mann_kendall` (private).

Every kernel takes a C-contiguous ``(n_series, n_time)`` float64 array in which NaN marks a missing
value and writes one value per series into preallocated outputs. :func:`mann_kendall_batch` runs a
``prange`` over a few chunks of series per thread, with scratch buffers allocated once per chunk
(allocating per series cost more than the tests themselves). Validation, dtype handling and
reshaping live in :mod:`unmix.trend.mann_kendall`; nothing here raises for bad data, it writes NaN
instead.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from ._kendall_numba import _mid_ranks, _mk_s, _normal_two_sided_p, _var_s, _z_cc
from ._prewhiten_numba import _acf1, _iterative_prewhiten
from ._sen_slope_numba import _sen_index_slope

# correction codes, kept in step with ``MannKendallCorrection`` in mann_kendall.py
NONE = 0
PREWHITEN = 1
TREND_FREE_PREWHITEN = 2
HAMED_RAO = 3
ITERATIVE_PREWHITEN = 4

EXACT_MAX_N = 10
# two-sided 5 % normal quantile: Hamed & Rao (1998) keep only rank autocorrelations outside
# +-z_{0.975}/sqrt(n) (as pymannkendall does with its default alpha = 0.05)
_Z975 = 1.959963984540054


@njit(cache=True)
def _mann_kendall_one(r, y, tg, use_tg, correction, exact_cdf, x, g, w, sbuf, buf, tmp, ranks,
                      s_out, var_out, z_out, p_out, tau_out, n_out):
    nt = y.shape[1]
    m = 0
    for k in range(nt):
        v = y[r, k]
        if not math.isnan(v):
            x[m] = v
            g[m] = tg[k]
            m += 1
    n_out[r] = m
    if m < 3:
        s_out[r] = np.nan
        var_out[r] = np.nan
        z_out[r] = np.nan
        p_out[r] = np.nan
        tau_out[r] = np.nan
        return
    # all values equal: no evidence of any trend under every correction
    allsame = True
    for k in range(1, m):
        if x[k] != x[0]:
            allsame = False
            break
    if allsame:
        s_out[r] = 0.0
        var_out[r] = 0.0
        z_out[r] = 0.0
        p_out[r] = 1.0
        tau_out[r] = 0.0
        return

    ser = x
    mm = m
    ut = use_tg
    if correction == PREWHITEN:
        r1 = _acf1(x, m)
        for k in range(m - 1):
            w[k] = x[k + 1] - r1 * x[k]
        ser = w
        mm = m - 1
        ut = False
    elif correction == TREND_FREE_PREWHITEN:
        # arithmetic in the order of pymannkendall's source, so that results agree to the bit
        b = _sen_index_slope(x, m, buf, tmp)
        for k in range(m):
            sbuf[k] = x[k] - (k + 1) * b
        r1 = _acf1(sbuf, m)
        for k in range(m - 1):
            w[k] = sbuf[k + 1] - sbuf[k] * r1 + (k + 1) * b
        ser = w
        mm = m - 1
        ut = False
    elif correction == ITERATIVE_PREWHITEN:
        rho, _, _ = _iterative_prewhiten(x, m, w, sbuf, buf, tmp, False)
        if rho > 0.0:
            ser = w
            mm = m - 1
            ut = False

    tol = 0.0
    if correction == PREWHITEN or correction == TREND_FREE_PREWHITEN or (
            correction == ITERATIVE_PREWHITEN and mm < m):
        # whitened values that are equal in exact arithmetic can differ by rounding; count
        # differences below 1e-10 of the largest magnitude as ties
        big = 0.0
        for k in range(mm):
            big = max(big, abs(ser[k]))
        tol = 1e-10 * big
    s = _mk_s(ser, mm, g, ut, tol)
    var, ties = _var_s(ser, mm, g, ut, sbuf, tol)

    if correction == HAMED_RAO:
        b = _sen_index_slope(x, m, buf, tmp)
        big = 0.0
        for k in range(m):
            w[k] = x[k] - (k + 1) * b
            big = max(big, abs(w[k]))
        # detrended values equal in exact arithmetic (e.g. the pair that sets the slope) may
        # differ by rounding: ranks treat differences below 1e-10 of the magnitude as ties
        _mid_ranks(w, m, ranks, 1e-10 * big)
        rmean = 0.5 * (m + 1.0)
        c0 = 0.0
        for k in range(m):
            ranks[k] -= rmean
            c0 += ranks[k] * ranks[k]
        bound = _Z975 / math.sqrt(m)
        sni = 0.0
        if c0 > 0.0:
            for lag in range(1, m):
                c = 0.0
                for k in range(m - lag):
                    c += ranks[k] * ranks[k + lag]
                rho = c / c0
                if rho > bound or rho < -bound:
                    sni += (m - lag) * (m - lag - 1.0) * (m - lag - 2.0) * rho
        mf = float(m)
        var = var * (1.0 + 2.0 * sni / (mf * (mf - 1.0) * (mf - 2.0)))

    s_out[r] = s
    var_out[r] = var
    tau_out[r] = s / (0.5 * mm * (mm - 1.0))
    if var > 0.0:
        z = _z_cc(s, var)
        if correction != HAMED_RAO and (not ties) and mm <= EXACT_MAX_N:
            # exact permutation p (Kendall 1975): S = N - 2 D, D = discordant pairs
            npairs = mm * (mm - 1) // 2
            d = int(round((npairs - abs(s)) / 2.0))
            p = min(2.0 * exact_cdf[mm, d], 1.0)
        else:
            p = _normal_two_sided_p(z)
    elif var == 0.0:
        z = 0.0
        p = 1.0
    else:
        # Hamed-Rao factor <= 0: the corrected variance is not defined
        z = np.nan
        p = np.nan
    z_out[r] = z
    p_out[r] = p


@njit(cache=True, parallel=True)
def mann_kendall_batch(y, tg, use_tg, correction, exact_cdf, n_chunks, s_out, var_out, z_out,
                       p_out, tau_out, n_out):
    ns, nt = y.shape
    for c in prange(n_chunks):
        x = np.empty(nt)
        g = np.empty(nt, dtype=np.int64)
        w = np.empty(nt)
        sbuf = np.empty(nt)
        # pairwise-slope scratch only for the corrections that detrend with the Sen slope: the
        # original test and plain pre-whitening run on series of any length in O(n) memory
        npair = nt * (nt - 1) // 2 if correction >= TREND_FREE_PREWHITEN else 1
        buf = np.empty(max(1, npair))
        tmp = np.empty(max(1, npair))
        ranks = np.empty(nt)
        for r in range(c * ns // n_chunks, (c + 1) * ns // n_chunks):
            _mann_kendall_one(r, y, tg, use_tg, correction, exact_cdf, x, g, w, sbuf, buf, tmp,
                              ranks, s_out, var_out, z_out, p_out, tau_out, n_out)
