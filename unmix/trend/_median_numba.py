"""Selection kernels behind the Sen medians of :mod:`unmix.trend` (private).

Quickselect with a branch-free partition (:func:`_select`), the sampled-band median
(:func:`_median_band`, with a band hint from a previous median: :func:`_median_band_hint`), and
:func:`_median_within`, one branch-free counting pass that tells whether the median of an array
lies in a given band (used both to accept a band hint and to settle the last round of iterative
pre-whitening without a median). Nothing here raises for bad data.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit


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
def _median_within(a, m, lo, hi):
    """(True if the median of a[:m] (m >= 1) certainly lies in [lo, hi], number of values in
    [lo, hi]).

    The median certainly lies in the band when both middle order statistics do (then so does
    their mean, also after rounding). One branch-free counting pass, much cheaper than the median
    itself. The count lets :func:`_median_band_hint` also reject a band holding more than half of
    the values (too wide to save work)."""
    k = m // 2
    k_lo = k if m % 2 == 1 else k - 1
    below = 0
    upto = 0
    for i in range(m):
        v = a[i]
        below += v < lo
        upto += v <= hi
    return below <= k_lo and upto >= k + 1, upto - below


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
    if hint_lo <= hint_hi:  # False for NaN
        within, n_band = _median_within(a, m, hint_lo, hint_hi)
        if within and 2 * n_band <= m:
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
