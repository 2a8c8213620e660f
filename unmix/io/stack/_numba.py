"""Compiled decoding of stored band values to reflectance, one pass per window or per TIFF block.

:func:`decode_bands` / :func:`decode_bands_last` decode arrays as GDAL returns them;
:func:`decode_block` decodes one TIFF block (tile or strip) as tifffile returns it (inflated, the
predictor undone) straight into its place in a band-last window. All release the GIL and use the
same float32 arithmetic, so both read paths give the same bits.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["decode_bands", "decode_bands_last", "decode_block"]


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


@njit(cache=True, nogil=True, inline="always")
def _put_row(vals, base, nsamp, c_lo, c_hi, sel, dest, out, o_r, o_c, s, o, nodata, has_nodata):  # pragma: no cover
    """Decode columns c_lo..c_hi of one block row (samples ``vals[base:]``) into ``out[o_r, o_c:]``."""
    nan = np.float32(np.nan)
    ww, nb = out.shape[1], out.shape[2]
    identity = sel.size == nsamp and sel.size == nb
    uniform = True
    for k in range(sel.size):
        identity = identity and sel[k] == k and dest[k] == k
        b = dest[k]
        b0 = dest[0]
        if s[b] != s[b0] or o[b] != o[b0] or has_nodata[b] != has_nodata[b0] or nodata[b] != nodata[b0]:
            uniform = False
    if identity and uniform:  # the usual case: the row segment is one contiguous run in and out
        n = (c_hi - c_lo) * nsamp
        start = (o_r * ww + o_c) * nb
        src = vals[base + c_lo * nsamp: base + c_lo * nsamp + n]  # slices: no index wrap-around, so it vectorises
        dst = out.reshape(-1)[start: start + n]
        s0, o0, nd = s[0], o[0], nodata[0]
        if has_nodata[0]:
            for i in range(n):
                v = src[i]
                dst[i] = nan if v == nd else np.float32(v) * s0 + o0
        else:
            for i in range(n):
                dst[i] = np.float32(src[i]) * s0 + o0
        return
    for c in range(c_lo, c_hi):
        px = base + c * nsamp
        oc = o_c + c - c_lo
        for k in range(sel.size):
            b = dest[k]
            v = vals[px + sel[k]]
            if has_nodata[b] and v == nodata[b]:
                out[o_r, oc, b] = nan
            else:
                out[o_r, oc, b] = np.float32(v) * s[b] + o[b]


@njit(cache=True, nogil=True)
def decode_block(vals, row_len, nsamp, r_lo, r_hi, c_lo, c_hi, sel, dest, out, o_r, o_c, s, o, nodata,
                 has_nodata):  # pragma: no cover - compiled
    """Decode rows r_lo..r_hi, columns c_lo..c_hi of one decompressed block (predictor undone).

    ``vals`` the block's samples (flat, ``row_len`` per row, ``nsamp`` per pixel); the sample
    ``sel[k]`` of a pixel goes to band ``dest[k]`` of ``out`` (y, x, band) float32, row ``o_r``,
    column ``o_c`` onwards; ``s``/``o`` float32 scale/offset, ``nodata``/``has_nodata`` per band.
    """
    for r in range(r_lo, r_hi):
        _put_row(vals, r * row_len, nsamp, c_lo, c_hi, sel, dest, out, o_r + r - r_lo, o_c, s, o, nodata, has_nodata)
