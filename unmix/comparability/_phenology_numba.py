"""Compiled per-pixel composites behind :mod:`unmix.comparability.phenology` (private).

Both kernels take the series flattened to (n_pixels, n_time), the time indices ordered by group
(``order``) and the start of each group in it (``starts``, length n_groups + 1), so each pixel walks
only the dates of one group at a time. NaN means no data; a group without a valid value gives NaN and
a count of 0. Nothing here raises for bad data.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange


@njit(parallel=True, cache=True)
def _median_groups(values, order, starts, out, counts):
    n_pix = values.shape[0]
    n_groups = starts.shape[0] - 1
    longest = 0
    for g in range(n_groups):
        longest = max(longest, starts[g + 1] - starts[g])
    for p in prange(n_pix):
        buf = np.empty(max(longest, 1), np.float64)
        for g in range(n_groups):
            m = 0
            for k in range(starts[g], starts[g + 1]):
                v = values[p, order[k]]
                if v == v:  # not NaN
                    # insertion sort: a year holds a handful of dates in a window
                    j = m - 1
                    while j >= 0 and buf[j] > v:
                        buf[j + 1] = buf[j]
                        j -= 1
                    buf[j + 1] = v
                    m += 1
            counts[p, g] = m
            if m == 0:
                out[p, g] = np.nan
            elif m % 2 == 1:
                out[p, g] = buf[m // 2]
            else:
                out[p, g] = 0.5 * (buf[m // 2 - 1] + buf[m // 2])


@njit(parallel=True, cache=True)
def _closest_groups(values, distance, order, starts, out, counts, chosen):
    """Value of the valid date nearest the target day; ties go to the earlier date (smaller index)."""
    n_pix = values.shape[0]
    n_groups = starts.shape[0] - 1
    for p in prange(n_pix):
        for g in range(n_groups):
            m = 0
            best = -1
            best_d = np.inf
            for k in range(starts[g], starts[g + 1]):
                t = order[k]
                v = values[p, t]
                if v == v:
                    m += 1
                    d = distance[t]
                    if d < best_d or (d == best_d and t < best):
                        best_d = d
                        best = t
            counts[p, g] = m
            chosen[p, g] = best
            out[p, g] = values[p, best] if best >= 0 else np.nan
