"""Compiled area means of source pixels nested in a coarser target grid (private; see :mod:`.read`)."""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["nested_mean", "nested_share"]


@njit(cache=True, nogil=True, inline="always")
def _source_index(n_target, down, offset, up):  # pragma: no cover - compiled
    """Source row (or column) of each fine pixel under ``n_target`` target pixels."""
    idx = np.empty(n_target * down, np.int64)
    for f in range(n_target * down):
        idx[f] = (f + offset) // up
    return idx


@njit(cache=True, nogil=True)
def nested_mean(src, up, down, r_off, c_off, nodata, out, valid):  # pragma: no cover - compiled
    """Mean of the non-fill (and non-NaN) source values over each target pixel (down x down fine pixels,
    each lying in source pixel (fine // up)); ``out`` gets ``nodata`` and ``valid`` False where none is valid."""
    rows, cols = out.shape
    ri = _source_index(rows, down, r_off, up)
    ci = _source_index(cols, down, c_off, up)
    s = np.zeros(cols)
    n = np.zeros(cols, np.int64)
    for i in range(rows):
        s[:] = 0.0
        n[:] = 0
        for fr in range(i * down, (i + 1) * down):
            row = src[ri[fr]]
            if up == 1:  # fine pixels are the source pixels: contiguous reads
                row = row[c_off:c_off + cols * down]
            for j in range(cols):  # no division in the inner loop: it cost 10x
                acc = 0.0
                cnt = 0
                for fc in range(j * down, (j + 1) * down):
                    v = row[fc] if up == 1 else row[ci[fc]]
                    if v != nodata and v == v:  # neither the fill value nor NaN
                        acc += v
                        cnt += 1
                s[j] += acc
                n[j] += cnt
        for j in range(cols):
            if n[j]:
                out[i, j] = s[j] / n[j]
                valid[i, j] = True
            else:
                out[i, j] = nodata
                valid[i, j] = False


@njit(cache=True, nogil=True)
def nested_share(bad, up, down, r_off, c_off, out):  # pragma: no cover - compiled
    """Share of each target pixel covered by source pixels flagged in ``bad``."""
    rows, cols = out.shape
    ri = _source_index(rows, down, r_off, up)
    ci = _source_index(cols, down, c_off, up)
    area = float(down * down)
    n = np.zeros(cols, np.int64)
    for i in range(rows):
        n[:] = 0
        for fr in range(i * down, (i + 1) * down):
            row = bad[ri[fr]]
            for j in range(cols):
                cnt = 0
                for fc in range(j * down, (j + 1) * down):
                    cnt += row[ci[fc]]
                n[j] += cnt
        for j in range(cols):
            out[i, j] = n[j] / area
