"""Compiled decoding of stored band values to reflectance, one pass per window (used by io.stack)."""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["decode_bands"]


@njit(cache=True, nogil=True)
def decode_bands(raw, scales, offsets, nodata, has_nodata, out):  # pragma: no cover - compiled
    """out[b] = float32(raw[b]) * scales[b] + offsets[b], NaN where raw[b] equals nodata[b].

    ``raw`` (band, y, x) of any numeric dtype; ``out`` (band, y, x) float32; scales, offsets and
    nodata are float32 / float64 arrays per band, ``has_nodata`` a bool per band. The arithmetic is
    float32, as numpy's ``raw.astype(float32) * float32(scale) + float32(offset)``; releases the GIL
    so dask's reader threads decode side by side.
    """
    nb, ny, nx = raw.shape
    nan = np.float32(np.nan)
    for b in range(nb):
        s = np.float32(scales[b])
        o = np.float32(offsets[b])
        nd = nodata[b]
        check = has_nodata[b]
        for r in range(ny):
            for c in range(nx):
                v = raw[b, r, c]
                if check and v == nd:
                    out[b, r, c] = nan
                else:
                    out[b, r, c] = np.float32(v) * s + o
