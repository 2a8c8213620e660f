"""Compiled kernels behind :mod:`unmix.trend` (private).

Every kernel takes a C-contiguous ``(n_series, n_time)`` float64 array in which NaN marks a missing
value and writes one value per series into preallocated outputs. The ``*_batch`` kernels run a
``prange`` over a few chunks of series per thread, with scratch buffers allocated once per chunk
(allocating per series cost more than the tests themselves); the Sen slope is split in two
``nogil`` block kernels around numpy's row sort. The Sen medians inside the corrections (one
for trend-free pre-whitening and Hamed-Rao, one per round of iterative pre-whitening) use a
sampled-band quickselect (:func:`_median_band`); the rounds of iterative pre-whitening try the
band of the previous round's median first (:func:`_median_band_hint`), detect two-round cycles and,
inside the test, settle the last round by a count (see :func:`_iterative_prewhiten`); measured
together about 30 % less time for that correction. Inner loops over pairs are written branch-free
so that they vectorise. Validation, dtype handling and reshaping live in
:mod:`unmix.trend`; nothing here raises for bad data, it writes NaN instead.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

# correction codes, kept in step with ``MannKendallCorrection`` in trend.py
NONE = 0
PREWHITEN = 1
TREND_FREE_PREWHITEN = 2
HAMED_RAO = 3
ITERATIVE_PREWHITEN = 4

# iterative pre-whitening (Zhang et al. 2000; Wang & Swail 2001), see ``_iterative_prewhiten``
IPW_MIN_R = 0.05  # below this bias-corrected lag-1 autocorrelation the series is not whitened
IPW_MAX_R = 0.99  # cap (our choice) so that 1 - r stays positive when the estimate reaches 1
IPW_MAX_ITER = 20
# convergence: rho and the slope each change by <= 1 % between rounds (absolute guards for values
# near zero: 1e-4 for rho, 1e-4 residual sd over the record for the slope). The Sen median moves
# in discrete jumps, so tighter tolerances end in two-round cycles rather than convergence.
IPW_TOL = 0.01
IPW_TOL_R_ABS = 1e-4
IPW_TOL_B_ABS = 1e-4

EXACT_MAX_N = 10
_SQRT2 = math.sqrt(2.0)
# two-sided 5 % normal quantile: Hamed & Rao (1998) keep only rank autocorrelations outside
# +-z_{0.975}/sqrt(n) (as pymannkendall does with its default alpha = 0.05)
_Z975 = 1.959963984540054


# ---------------------------------------------------------------------------------------------
# small helpers
# ---------------------------------------------------------------------------------------------
@njit(cache=True)
def _normal_two_sided_p(z):
    return math.erfc(abs(z) / _SQRT2)


@njit(cache=True)
def _tie_terms(sorted_vals, m, tol):
    """Sums over tie groups of u(u-1)(2u+5), u(u-1)(u-2), u(u-1) for sorted values.

    Neighbours closer than ``tol`` belong to the same group.
    """
    a = 0.0
    b = 0.0
    c = 0.0
    i = 0
    while i < m:
        j = i + 1
        while j < m and sorted_vals[j] - sorted_vals[j - 1] <= tol:
            j += 1
        u = float(j - i)
        if u > 1.0:
            a += u * (u - 1.0) * (2.0 * u + 5.0)
            b += u * (u - 1.0) * (u - 2.0)
            c += u * (u - 1.0)
        i = j
    return a, b, c


@njit(cache=True)
def _tie_terms_count(x, m, tol):
    """Same sums as :func:`_tie_terms` on unsorted x by counting: a group of size u contributes
    u(u-1)(2u+5) = sum over its u members of (u-1)(2u+5). O(m^2) but branch-free, faster than a
    sort for a few dozen values."""
    a = 0.0
    b = 0.0
    c = 0.0
    for i in range(m):
        xi = x[i]
        u = 0
        for j in range(m):
            d = x[j] - xi
            u += (d <= tol) & (d >= -tol)
        uf = float(u)
        a += (uf - 1.0) * (2.0 * uf + 5.0)
        b += (uf - 1.0) * (uf - 2.0)
        c += uf - 1.0
    return a, b, c


@njit(cache=True)
def _median_count(x, m):
    """Median of x[:m] by counting ranks (no reordering); O(m^2), branch-free inner loop."""
    k_hi = m // 2
    k_lo = k_hi if m % 2 == 1 else k_hi - 1
    lo = np.nan
    hi = np.nan
    for i in range(m):
        xi = x[i]
        less = 0
        eq = 0
        for j in range(m):
            less += x[j] < xi
            eq += x[j] == xi
        if less <= k_lo < less + eq:
            lo = xi
        if less <= k_hi < less + eq:
            hi = xi
    return 0.5 * (lo + hi)


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
def _insertion_sort(a, lo, hi):
    for i in range(lo + 1, hi):
        v = a[i]
        j = i - 1
        while j >= lo and a[j] > v:
            a[j + 1] = a[j]
            j -= 1
        a[j + 1] = v


@njit(cache=True)
def _select(a, lo, hi, k, tmp):
    """Put the k-th smallest of a[lo:hi] at a[k] (lo <= k < hi); a[lo:k] <= a[k] <= a[k+1:hi].

    Quickselect with a median-of-three pivot and a branch-free three-way partition through the
    scratch array ``tmp`` (len >= hi - lo): the comparisons of pairwise slopes are unpredictable,
    so a branchy partition spends most of its time in mispredicted branches.
    """
    while hi - lo > 16:
        x0 = a[lo]
        x1 = a[(lo + hi) >> 1]
        x2 = a[hi - 1]
        # median of three
        if x0 > x1:
            x0, x1 = x1, x0
        if x1 > x2:
            x1 = x2
        p = x1 if x1 > x0 else x0
        n = hi - lo
        nl = 0
        r = n
        for e in range(lo, hi):
            v = a[e]
            tmp[nl] = v
            tmp[r - 1] = v
            nl += v < p
            r -= v > p
        for e in range(nl, r):
            tmp[e] = p
        for e in range(n):
            a[lo + e] = tmp[e]
        kk = k - lo
        if kk < nl:
            hi = lo + nl
        elif kk >= r:
            lo = lo + r
        else:
            return
    _insertion_sort(a, lo, hi)


@njit(cache=True)
def _median_inplace(a, m, tmp):
    """Median of a[:m] (m >= 1); reorders a."""
    k = m // 2
    _select(a, 0, m, k, tmp)
    hi = a[k]
    if m % 2 == 1:
        return hi
    # the lower middle value is the largest of a[:k]
    lo = a[0]
    for i in range(1, k):
        if a[i] > lo:
            lo = a[i]
    return 0.5 * (lo + hi)


_SAMPLE = 63  # sample size of the pivot estimate in _median_band
_HINT_SHRINK = 0.12  # half-width of the next hint / width of the sampled band (tuned)
_SAMPLE_HALF_WIDTH = 8  # band = sample ranks median +- 8 (about +-2 sd of the sample median)


@njit(cache=True)
def _median_band(a, m, tmp):
    """Median of a[:m] (m >= 1); reorders a and overwrites tmp (len >= m).

    The sampling idea of Floyd & Rivest (1975, Communications of the ACM 18(3), 165-172,
    https://doi.org/10.1145/360680.360691): two order statistics of a strided sample of 63
    values, about 2 sample standard deviations either side of its median, bracket the median
    with high probability; one branch-free pass counts the values below the band and copies the
    band (about a quarter of the values) to tmp, where quickselect finishes. If the band misses
    the median (a few % of calls), quickselect runs on all of a. Same value as a sort: an order
    statistic of the same set. About twice as fast as quickselect on all of a for the ~800 slopes
    of a 40-step series.
    """
    return _median_band_hint(a, m, tmp, np.nan, np.nan)[0]


@njit(cache=True)
def _median_in_band(a, m, tmp, lo_v, hi_v):
    """Median of a[:m] from the values in [lo_v, hi_v] (copied to tmp, quickselect there); NaN
    if the band does not hold both middle order statistics. Reorders tmp and a."""
    k = m // 2
    k_lo = k if m % 2 == 1 else k - 1
    below = 0
    nb = 0
    for i in range(m):
        v = a[i]
        tmp[nb] = v
        below += v < lo_v
        nb += (v >= lo_v) & (v <= hi_v)
    if below > k_lo or below + nb <= k:
        return np.nan
    # tmp[:nb] holds the band; a is free to serve as scratch
    kk = k - below
    _select(tmp, 0, nb, kk, a)
    hi = tmp[kk]
    if m % 2 == 1:
        return hi
    kl = kk - 1  # >= 0 because below <= k - 1
    lo = tmp[0]
    for i in range(1, kl + 1):
        if tmp[i] > lo:
            lo = tmp[i]
    return 0.5 * (lo + hi)


@njit(cache=True)
def _median_band_hint(a, m, tmp, hint_lo, hint_hi):
    """(median of a[:m], band used) as :func:`_median_band`, trying the band [hint_lo, hint_hi]
    first (the band of a previous, similar median; NaN for none). One branch-free counting pass
    checks that the hint holds both middle order statistics and at most half of the values;
    then the sample and its two selections are skipped. Same value either way. The band returned
    for the next call is centred on this median: as wide as the hint after a hit, else
    2 * _HINT_SHRINK times the sampled band (a narrower band copies and selects fewer values;
    a miss costs only the counting pass)."""
    if m <= 2 * _SAMPLE:  # small: plain quickselect (and tmp[s:] below must hold s values)
        return _median_inplace(a, m, tmp), np.nan, np.nan
    k = m // 2
    k_lo = k if m % 2 == 1 else k - 1
    if hint_lo <= hint_hi:  # False for NaN
        below = 0
        upto = 0
        for i in range(m):
            v = a[i]
            below += v < hint_lo
            upto += v <= hint_hi
        if below <= k_lo and upto >= k + 1 and 2 * (upto - below) <= m:
            med = _median_in_band(a, m, tmp, hint_lo, hint_hi)  # a hit, by the counts above
            hw = 0.5 * (hint_hi - hint_lo)
            return med, med - hw, med + hw
    s = _SAMPLE
    for i in range(s):  # strided sample; its two order statistics by quickselect
        tmp[i] = a[(2 * i + 1) * m // (2 * s)]
    q_lo = s // 2 - _SAMPLE_HALF_WIDTH
    q_hi = s // 2 + _SAMPLE_HALF_WIDTH
    _select(tmp, 0, s, q_lo, tmp[s:])
    _select(tmp, q_lo + 1, s, q_hi, tmp[s:])
    lo_v = tmp[q_lo]
    hi_v = tmp[q_hi]
    med = _median_in_band(a, m, tmp, lo_v, hi_v)
    if math.isnan(med):
        # the band missed the median (a few % of calls): quickselect on all values
        return _median_inplace(a, m, tmp), np.nan, np.nan
    hw = _HINT_SHRINK * (hi_v - lo_v)
    return med, med - hw, med + hw


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


@njit(cache=True)
def _median_within(a, m, lo, hi):
    """True if the median of a[:m] (m >= 1) certainly lies in [lo, hi]: both middle order
    statistics do (then so does their mean, also after rounding). One branch-free counting pass,
    much cheaper than the median itself."""
    k = m // 2
    k_lo = k if m % 2 == 1 else k - 1
    below = 0
    upto = 0
    for i in range(m):
        v = a[i]
        below += v < lo
        upto += v <= hi
    return below <= k_lo and upto >= k + 1


@njit(cache=True)
def _acf1(x, m):
    """Lag-1 autocorrelation with the biased (1/n) autocovariance, as pymannkendall's ``__acf``;
    0 for a constant series (no autocorrelation to remove)."""
    return _acf1_sd(x, m)[0]


@njit(cache=True)
def _acf1_sd(x, m):
    """(lag-1 autocorrelation as :func:`_acf1`, biased standard deviation) of x[:m]."""
    mean = 0.0
    for i in range(m):
        mean += x[i]
    mean /= m
    c0 = 0.0
    c1 = 0.0
    for i in range(m):
        d = x[i] - mean
        c0 += d * d
        if i + 1 < m:
            c1 += d * (x[i + 1] - mean)
    if c0 == 0.0:
        return 0.0, 0.0
    return c1 / c0, math.sqrt(c0 / m)


@njit(cache=True)
def _iterative_prewhiten(x, m, w, d, buf, tmp, exact_b):
    """Iterative pre-whitening of x[:m] (Zhang et al. 2000; Wang & Swail 2001).

    Starting from the Sen slope b of x (against the step index), repeat: remove the trend,
    d_t = x_t - b t; lag-1 autocorrelation r of d, bias-corrected rho = (m r + 1) / (m - 4)
    (inverting E[r] ~ rho - (1 + 4 rho) / m); if rho < IPW_MIN_R the series is taken as
    independent (rho = 0, b = Sen slope of x), else rho is capped at IPW_MAX_R and
    w_t = (x_{t+1} - rho x_t) / (1 - rho), t < m - 1, and b = Sen slope of w; until rho and b
    converge (IPW_TOL) or IPW_MAX_ITER rounds. A detrended series without variance has
    rho = 0; series of fewer than 5 values are never whitened (the bias correction needs m > 4).

    Returns (rho, b, iterations); w[:m-1] holds the whitened series when rho > 0.

    Shortcuts that leave rho, w and the round count unchanged (every decision is the same):

    * a round whose rho equals the previous one exactly reuses the previous slope (same w);
    * the new b enters the next round only through d = x - b t, so rho and b are a fixed-point
      iteration b -> rho(b) -> b(rho). Once b of round t-1 equals b of round t-3 (exactly), the
      states from round t-2 on repeat with period 2 and so do the convergence checks; rounds t-1
      and t both failed, so no later round converges: jump to round IPW_MAX_ITER, whose state
      is that of round t or t-1 by parity;
    * with ``exact_b`` False (the test needs rho and w only), the last round does not compute
      its Sen median when one counting pass shows the median within the convergence tolerance
      of the previous b (with a 1e-9 relative margin for rounding): the round converges either
      way. The returned b is then that previous b, within the tolerance of the final slope.
    """
    b0, h_lo, h_hi = _median_band_hint(buf, _index_slopes(x, m, buf), tmp, np.nan, np.nan)
    if m < 5:
        return 0.0, b0, 0
    b = b0
    rho = -1.0  # no previous value
    b_1 = np.nan  # b of the round before last (b_1) and of the round before that (b_2)
    b_2 = np.nan
    it = 0
    while it < IPW_MAX_ITER:
        it += 1
        for k in range(m):
            d[k] = x[k] - b * k
        r, sd = _acf1_sd(d, m)
        new_rho = 0.0
        if sd > 0.0:
            new_rho = (m * r + 1.0) / (m - 4.0)
            if new_rho < IPW_MIN_R:
                new_rho = 0.0
            elif new_rho > IPW_MAX_R:
                new_rho = IPW_MAX_R
        dr = abs(new_rho - rho)
        rho_ok = dr <= IPW_TOL * abs(rho) or dr <= IPW_TOL_R_ABS
        if new_rho == 0.0:
            new_b = b0
        elif new_rho == rho:
            new_b = b  # w already holds the series whitened with this rho, b is its slope
        else:
            scale = 1.0 / (1.0 - new_rho)
            for k in range(m - 1):
                w[k] = (x[k + 1] - new_rho * x[k]) * scale
            c = _index_slopes(w, m - 1, buf)
            if not exact_b and rho_ok:
                tol = max(IPW_TOL * abs(b), IPW_TOL_B_ABS * sd / (m - 1.0)) * (1.0 - 1e-9)
                if _median_within(buf, c, b - tol, b + tol):
                    return new_rho, b, it
            new_b, h_lo, h_hi = _median_band_hint(buf, c, tmp, h_lo, h_hi)
        db = abs(new_b - b)
        done = rho_ok and (db <= IPW_TOL * abs(b) or db * (m - 1) <= IPW_TOL_B_ABS * sd)
        if done:
            rho = new_rho
            b = new_b
            break
        if it >= 3 and b == b_2:
            # period-2 cycle (see above): the final round repeats this one or the previous one
            if (IPW_MAX_ITER - it) % 2 == 1:
                new_rho = rho
                new_b = b
                if new_rho > 0.0:
                    scale = 1.0 / (1.0 - new_rho)
                    for k in range(m - 1):
                        w[k] = (x[k + 1] - new_rho * x[k]) * scale
            return new_rho, new_b, IPW_MAX_ITER
        b_2 = b_1
        b_1 = b
        rho = new_rho
        b = new_b
    # every round with rho > 0 rewrote w, so w holds the series whitened with the final rho
    return rho, b, it


@njit(cache=True, parallel=True)
def iterative_prewhiten_batch(y, n_chunks, series_out, rho_out, slope_out, iter_out):
    """Per series: the values the iterative pre-whitening test runs on (compacted to the front,
    NaN after), rho, Sen slope per step and the number of rounds (NaN / 0 below 3 values)."""
    ns, nt = y.shape
    for c in prange(n_chunks):
        x = np.empty(nt)
        w = np.empty(nt)
        d = np.empty(nt)
        buf = np.empty(max(1, nt * (nt - 1) // 2))
        tmp = np.empty(max(1, nt * (nt - 1) // 2))
        for r in range(c * ns // n_chunks, (c + 1) * ns // n_chunks):
            m = 0
            for k in range(nt):
                v = y[r, k]
                if not math.isnan(v):
                    x[m] = v
                    m += 1
            for k in range(nt):
                series_out[r, k] = np.nan
            if m < 3:
                rho_out[r] = np.nan
                slope_out[r] = np.nan
                iter_out[r] = 0
                continue
            rho, b, it = _iterative_prewhiten(x, m, w, d, buf, tmp, True)
            rho_out[r] = rho
            slope_out[r] = b
            iter_out[r] = it
            if rho > 0.0:
                for k in range(m - 1):
                    series_out[r, k] = w[k]
            else:
                for k in range(m):
                    series_out[r, k] = x[k]


@njit(cache=True)
def _mk_s(x, m, tg, use_tg, tol):
    """S = sum_{i<j} sgn(x_j - x_i); pairs in the same time-tie group (tg) count zero, and
    differences within +-tol count as ties."""
    s = 0
    if use_tg:
        for i in range(m - 1):
            xi = x[i]
            gi = tg[i]
            for j in range(i + 1, m):
                if tg[j] != gi:
                    d = x[j] - xi
                    s += (d > tol) - (d < -tol)
    else:
        for i in range(m - 1):
            xi = x[i]
            for j in range(i + 1, m):
                d = x[j] - xi
                s += (d > tol) - (d < -tol)  # branch-free sign, vectorises
    return float(s)


@njit(cache=True)
def _var_s(x, m, tg, use_tg, sbuf, tol):
    """Var(S) with ties in x (Kendall 1975) and, if any, ties in time (two-way formula).

    Returns (var, has_ties).
    """
    xa, xb, xc = _tie_terms_count(x, m, tol)
    mf = float(m)
    ta = 0.0
    tb = 0.0
    tc = 0.0
    if use_tg:
        # tg is non-decreasing along time, so its runs are the tie groups
        for i in range(m):
            sbuf[i] = tg[i]
        ta, tb, tc = _tie_terms(sbuf, m, 0.0)
    var = (mf * (mf - 1.0) * (2.0 * mf + 5.0) - xa - ta) / 18.0
    if ta > 0.0 and xa > 0.0:
        var += tb * xb / (9.0 * mf * (mf - 1.0) * (mf - 2.0)) + tc * xc / (2.0 * mf * (mf - 1.0))
    return var, (xa > 0.0 or ta > 0.0)


@njit(cache=True)
def _z_cc(s, var):
    if s > 0.0:
        return (s - 1.0) / math.sqrt(var)
    if s < 0.0:
        return (s + 1.0) / math.sqrt(var)
    return 0.0


@njit(cache=True)
def _mid_ranks(x, m, ranks, tol):
    """Mid-ranks, 1-based, of x[:m]: 1 + #smaller + #tied others / 2 (ties within +-tol).

    O(m^2) but branch-free, which beats sorting for series of a few dozen values.
    """
    for i in range(m):
        xi = x[i]
        below = 0
        tied = 0
        for j in range(m):
            d = x[j] - xi
            below += d < -tol
            tied += (d <= tol) & (d >= -tol)
        ranks[i] = 1.0 + below + 0.5 * (tied - 1)


# ---------------------------------------------------------------------------------------------
# Mann-Kendall
# ---------------------------------------------------------------------------------------------
def chunks(n_series, n_threads):
    """Number of chunks for the outer ``prange``: a few per thread; buffers live per chunk."""
    return max(1, min(n_series, 4 * n_threads))


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
        buf = np.empty(max(1, nt * (nt - 1) // 2))
        tmp = np.empty(max(1, nt * (nt - 1) // 2))
        ranks = np.empty(nt)
        for r in range(c * ns // n_chunks, (c + 1) * ns // n_chunks):
            _mann_kendall_one(r, y, tg, use_tg, correction, exact_cdf, x, g, w, sbuf, buf, tmp,
                              ranks, s_out, var_out, z_out, p_out, tau_out, n_out)


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

# ---------------------------------------------------------------------------------------------
# ---------------------------------------------------------------------------------------------
# Theil-Sen slope with the Sen (1968) / Gilbert (1987) interval
# ---------------------------------------------------------------------------------------------
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
# Pettitt
# ---------------------------------------------------------------------------------------------
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
