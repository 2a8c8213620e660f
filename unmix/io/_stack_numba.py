"""Compiled decoding of stored band values to reflectance, one pass per window (used by io.stack)."""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["decode_bands", "decode_bands_last"]


@njit(cache=True, nogil=True)
def decode_bands(raw, scales, offsets, nodata, has_nodata, out):  # pragma: no cover - compiled
    """out[b] = float32(raw[b]) * scales[b] + offsets[b], NaN where raw[b] equals nodata[b].

    ``raw`` (band, y, x) of any numeric dtype; ``out`` (band, y, x) float32; scales, offsets and
    nodata are float32 / float64 arrays per band, ``has_nodata`` a bool per band. The arithmetic is
    float32, as numpy's ``raw.astype(float32) * float32(scale) + float32(offset)``; releases the GIL
    so dask's reader threads decode side by side. Either array may be a (band, y, x) view of a
    band-last (y, x, band) buffer (slower here than :func:`decode_bands_last`).
    """
    nb, ny, nx = raw.shape
    nan = np.float32(np.nan)
    for b in range(nb):
        s0 = np.float32(scales[b])
        o0 = np.float32(offsets[b])
        nd = nodata[b]
        check = has_nodata[b]
        for r in range(ny):
            for c in range(nx):
                v = raw[b, r, c]
                if check and v == nd:
                    out[b, r, c] = nan
                else:
                    out[b, r, c] = np.float32(v) * s0 + o0


@njit(cache=True, nogil=True)
def decode_bands_last(raw, scales, offsets, nodata, has_nodata, out):  # pragma: no cover - compiled
    """As :func:`decode_bands` for band-last arrays: ``raw`` (y, x, band), ``out`` (y, x, band) float32.

    Both C-contiguous. When every band has the same scale, offset and nodata (the usual case) the
    window is one flat loop that the compiler vectorises; otherwise pixel by pixel, band innermost.
    """
    ny, nx, nb = raw.shape
    nan = np.float32(np.nan)
    s = np.empty(nb, dtype=np.float32)
    o = np.empty(nb, dtype=np.float32)
    uniform = True
    for b in range(nb):
        s[b] = np.float32(scales[b])
        o[b] = np.float32(offsets[b])
        if has_nodata[b] != has_nodata[0] or (has_nodata[b] and nodata[b] != nodata[0]):
            uniform = False
        if s[b] != s[0] or o[b] != o[0]:
            uniform = False
    if uniform:
        flat = raw.reshape(-1)
        dest = out.reshape(-1)
        s0 = s[0]
        o0 = o[0]
        if has_nodata[0]:
            nd = nodata[0]
            for i in range(flat.size):
                v = flat[i]
                dest[i] = nan if v == nd else np.float32(v) * s0 + o0
        else:
            for i in range(flat.size):
                dest[i] = np.float32(flat[i]) * s0 + o0
        return
    for r in range(ny):
        for c in range(nx):
            for b in range(nb):
                v = raw[r, c, b]
                if has_nodata[b] and v == nodata[b]:
                    out[r, c, b] = nan
                else:
                    out[r, c, b] = np.float32(v) * s[b] + o[b]
