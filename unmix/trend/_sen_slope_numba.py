"""Compiled kernels behind :func:`unmix.trend.sen_slope` and :func:`unmix.trend.seasonal_sen_slope`
(private).

The Sen slope is split in two ``nogil`` block kernels around numpy's row sort
(:func:`sen_pairs_block`, :func:`sen_pick_block`). :func:`_index_slopes` and
:func:`_sen_index_slope` serve the Mann-Kendall corrections, which detrend against the step index.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from ._kendall_numba import _tie_terms, _tie_terms_count
from ._median_numba import _median_band, _median_count


@njit(cache=True)
def _round_half_even(x):
    # same rounding as numpy.round, used by scipy.stats.theilslopes for the interval ranks
    f = math.floor(x)
    d = x - f
    if d > 0.5:
        return f + 1.0
    if d < 0.5:
        return f
    if f % 2.0 == 0.0:
        return f
    return f + 1.0


@njit(cache=True)
def _index_slopes(x, m, buf):
    """buf[:c] = (x_j - x_i) / (j - i) over i < j < m (series in consecutive steps); returns c."""
    c = 0
    for i in range(m - 1):
        xi = x[i]
        base = c - i - 1  # no loop-carried counter: the inner loop vectorises
        for j in range(i + 1, m):
            buf[base + j] = (x[j] - xi) / (j - i)
        c += m - 1 - i
    return c


@njit(cache=True)
def _sen_index_slope(x, m, buf, tmp):
    """Median of (x_j - x_i) / (j - i) over i < j < m (series in consecutive steps)."""
    return _median_band(buf, _index_slopes(x, m, buf), tmp)


@njit(cache=True, nogil=True)
def sen_pairs_block(y, t, t_distinct, zq, slopes, info):
    """First half of the Sen slope for a block of series: pairwise slopes and interval ranks.

    ``slopes[r, :c]`` gets the c pairwise slopes of series r (pairs with distinct times), the rest
    of the row +inf so that a row sort leaves them last; ``info[r]`` = (c, rl, ru, median y,
    median t). The caller sorts the rows (numpy's vectorised sort) and calls
    :func:`sen_pick_block`. ``nogil`` so that blocks run in parallel threads.
    """
    ns, nt = y.shape
    x = np.empty(nt)
    tv = np.empty(nt)
    npair = slopes.shape[1]
    for r in range(ns):
        m = 0
        for k in range(nt):
            v = y[r, k]
            if not math.isnan(v):
                x[m] = v
                tv[m] = t[k]
                m += 1
        row = slopes[r]
        c = 0
        if t_distinct:  # every pair counts: no branch, the inner loop vectorises
            for i in range(m - 1):
                xi = x[i]
                ti = tv[i]
                base = c - i - 1
                for j in range(i + 1, m):
                    row[base + j] = (x[j] - xi) / (tv[j] - ti)
                c += m - 1 - i
        else:
            for i in range(m - 1):
                xi = x[i]
                ti = tv[i]
                for j in range(i + 1, m):
                    dt = tv[j] - ti
                    if dt > 0.0:  # t is sorted, so only equal times are skipped
                        row[c] = (x[j] - xi) / dt
                        c += 1
        for i in range(c, npair):
            row[i] = np.inf
        info[r, 0] = c
        if c == 0:
            continue
        # interval ranks (scipy.stats.theilslopes, after Sen 1968 eq. 2.6; Gilbert 1987)
        ya, _, _ = _tie_terms_count(x, m, 0.0)
        ta = 0.0
        if not t_distinct:
            ta, _, _ = _tie_terms(tv, m, 0.0)
        mf = float(m)
        sigsq = (mf * (mf - 1.0) * (2.0 * mf + 5.0) - ta - ya) / 18.0
        ru = -1.0
        rl = -1.0
        if sigsq >= 0.0:
            sigma = math.sqrt(sigsq)
            ru = min(_round_half_even((c - zq * sigma) / 2.0), c - 1.0)
            rl = max(_round_half_even((c + zq * sigma) / 2.0) - 1.0, 0.0)
        info[r, 1] = rl
        info[r, 2] = ru
        info[r, 3] = _median_count(x, m)
        info[r, 4] = tv[m // 2] if m % 2 == 1 else 0.5 * (tv[m // 2 - 1] + tv[m // 2])


@njit(cache=True, nogil=True)
def sen_pick_block(slopes, info, slope_out, icpt_out, low_out, high_out):
    """Second half of the Sen slope: order statistics from row-sorted slopes."""
    for r in range(slopes.shape[0]):
        c = int(info[r, 0])
        if c == 0:
            slope_out[r] = np.nan
            icpt_out[r] = np.nan
            low_out[r] = np.nan
            high_out[r] = np.nan
            continue
        k = c // 2
        row = slopes[r]
        med = row[k] if c % 2 == 1 else 0.5 * (row[k - 1] + row[k])
        slope_out[r] = med
        icpt_out[r] = info[r, 3] - med * info[r, 4]
        rl = int(info[r, 1])
        ru = int(info[r, 2])
        if ru < 0 or rl > c - 1:
            low_out[r] = np.nan
            high_out[r] = np.nan
        else:
            low_out[r] = row[rl]
            high_out[r] = row[ru]


# ---------------------------------------------------------------------------------------------
# seasonal Kendall slope estimator (Hirsch, Slack & Smith 1982)
# ---------------------------------------------------------------------------------------------
@njit(cache=True)
def _seasonal_sen_one(r, y, t, codes, n_seasons, zq, x, tv, xs, ts, buf, slope_out, icpt_out,
                      low_out, high_out):
    nt = y.shape[1]
    m_all = 0
    for k in range(nt):
        v = y[r, k]
        if not math.isnan(v):
            x[m_all] = v
            tv[m_all] = t[k]
            m_all += 1
    c = 0
    sigsq = 0.0
    for g in range(n_seasons):
        m = 0
        for k in range(nt):
            if codes[k] == g:
                v = y[r, k]
                if not math.isnan(v):
                    xs[m] = v
                    ts[m] = t[k]
                    m += 1
        for i in range(m - 1):
            for j in range(i + 1, m):
                dt = ts[j] - ts[i]
                if dt > 0.0:  # t is sorted, so only equal times are skipped
                    buf[c] = (xs[j] - xs[i]) / dt
                    c += 1
        # Var(S_g) with ties in values and in time; seasons add up (Hirsch et al. 1982)
        ya, _, _ = _tie_terms_count(xs, m, 0.0)
        ta, _, _ = _tie_terms(ts, m, 0.0)
        mf = float(m)
        sigsq += (mf * (mf - 1.0) * (2.0 * mf + 5.0) - ta - ya) / 18.0
    if c == 0:
        slope_out[r] = np.nan
        icpt_out[r] = np.nan
        low_out[r] = np.nan
        high_out[r] = np.nan
        return
    s = buf[:c]
    s.sort()
    k = c // 2
    med = s[k] if c % 2 == 1 else 0.5 * (s[k - 1] + s[k])
    slope_out[r] = med
    med_t = tv[m_all // 2] if m_all % 2 == 1 else 0.5 * (tv[m_all // 2 - 1] + tv[m_all // 2])
    icpt_out[r] = _median_count(x, m_all) - med * med_t
    # interval ranks as for the Sen slope (sen_pairs_block), over the within-season slopes
    low_out[r] = np.nan
    high_out[r] = np.nan
    if sigsq >= 0.0:
        sigma = math.sqrt(sigsq)
        ru = int(min(_round_half_even((c - zq * sigma) / 2.0), c - 1.0))
        rl = int(max(_round_half_even((c + zq * sigma) / 2.0) - 1.0, 0.0))
        if ru >= 0 and rl <= c - 1:
            low_out[r] = s[rl]
            high_out[r] = s[ru]


@njit(cache=True, parallel=True)
def seasonal_sen_batch(y, t, codes, n_seasons, zq, n_chunks, slope_out, icpt_out, low_out,
                       high_out):
    """Seasonal Sen slope, intercept and interval of each series (t sorted, NaN = missing)."""
    ns, nt = y.shape
    for c in prange(n_chunks):
        x = np.empty(nt)
        tv = np.empty(nt)
        xs = np.empty(nt)
        ts = np.empty(nt)
        buf = np.empty(max(1, nt * (nt - 1) // 2))
        for r in range(c * ns // n_chunks, (c + 1) * ns // n_chunks):
            _seasonal_sen_one(r, y, t, codes, n_seasons, zq, x, tv, xs, ts, buf, slope_out,
                              icpt_out, low_out, high_out)
