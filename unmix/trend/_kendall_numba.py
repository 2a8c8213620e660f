"""Compiled building blocks of Kendall's S statistic, shared by the Mann-Kendall, seasonal Kendall
and Sen-interval kernels of :mod:`unmix.trend` (private).

S and its tie-corrected variance (Kendall 1975; two-way ties in values and time), the
continuity-corrected normal score, the two-sided normal p-value, tie-group sums and mid-ranks.
Inner loops over pairs are written branch-free so that they vectorise.
"""

from __future__ import annotations

import math

from numba import njit

_SQRT2 = math.sqrt(2.0)


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
