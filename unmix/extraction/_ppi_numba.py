"""Compiled inner loop of :func:`unmix.extraction.ppi_counts` (pixel purity index), private."""

from __future__ import annotations

import numpy as np
from numba import njit, prange

_GROUP = 32  # skewers handled together per pass over the pixels (one read of the data per group)


@njit(cache=True, parallel=True)
def ppi_extremes(z, skewers_t, valid):  # pragma: no cover - compiled
    """Row of the largest and of the smallest projection of ``z`` (n, d) on each skewer.

    ``skewers_t`` is (d, k) (skewers as columns, contiguous per band so the inner loop over
    skewers vectorises); rows with ``valid[i] == False`` are skipped. Ties keep the first row,
    like ``numpy.argmax``.
    """
    n, d = z.shape
    k = skewers_t.shape[1]
    n_groups = (k + _GROUP - 1) // _GROUP
    hi_idx = np.zeros(k, dtype=np.int64)
    lo_idx = np.zeros(k, dtype=np.int64)
    for g in prange(n_groups):
        j0 = g * _GROUP
        m = min(k, j0 + _GROUP) - j0
        acc = np.empty(_GROUP)
        best_hi = np.full(_GROUP, -np.inf)
        best_lo = np.full(_GROUP, np.inf)
        arg_hi = np.zeros(_GROUP, dtype=np.int64)
        arg_lo = np.zeros(_GROUP, dtype=np.int64)
        for i in range(n):
            if not valid[i]:
                continue
            for q in range(m):
                acc[q] = 0.0
            for b in range(d):
                zb = z[i, b]
                for q in range(m):
                    acc[q] += zb * skewers_t[b, j0 + q]
            for q in range(m):
                if acc[q] > best_hi[q]:
                    best_hi[q] = acc[q]
                    arg_hi[q] = i
                if acc[q] < best_lo[q]:
                    best_lo[q] = acc[q]
                    arg_lo[q] = i
        for q in range(m):
            hi_idx[j0 + q] = arg_hi[q]
            lo_idx[j0 + q] = arg_lo[q]
    return hi_idx, lo_idx
