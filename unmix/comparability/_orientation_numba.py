"""Compiled kernel of :func:`unmix.comparability.orientation.orientation_field`. Private.

One pass per band over a block: fill the gaps with the band's mean, smooth with a sampled Gaussian
(rows, then columns; the edge value repeated beyond the block), take central differences in noise units
and add the double-angle field ``g^2 / |g|`` to the sum over bands. numpy and scipy took a dozen
temporary planes per band for the same (about 6.5 ms for six bands of 256 x 256 pixels; this kernel
about a quarter of that), and the kernel releases the GIL, so dates measured by dask's threads run side
by side.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"nsz", "arcp", "contract", "afn", "reassoc"})
def orientation_sum(planes, valid, scales, weights, out_re, out_im):  # pragma: no cover - compiled
    """Add each band's double-angle gradient field to ``out_re``/``out_im`` (rows - 2, cols - 2), float32.

    ``planes`` (bands, rows, cols) float32, any strides; ``valid`` (rows, cols) bool; ``scales`` (bands,)
    float64 noise standard deviations (bands whose scale is not positive are skipped); ``weights`` the
    normalised Gaussian taps (2 r + 1,) float64. Smoothing runs along rows first, then columns, in
    double precision, each pass stored in single precision, as ``scipy.ndimage.gaussian_filter`` does on float32 input with ``mode='nearest'``.
    Pixels whose field is not finite add nothing.
    """
    n_b, rows, cols = planes.shape
    r = (weights.shape[0] - 1) // 2
    w = weights
    filled = np.empty((rows, cols), np.float32)
    tmp = np.empty((rows, cols), np.float32)
    line = np.empty(cols, np.float64)
    smooth = np.empty((rows, cols), np.float32)
    for b in range(n_b):
        scale = scales[b]
        if not scale > 0:
            continue
        total = 0.0
        count = 0
        for i in range(rows):
            for j in range(cols):
                if valid[i, j]:
                    total += planes[b, i, j]
                    count += 1
        mean = np.float32(total / count) if count > 0 else np.float32(0.0)
        for i in range(rows):
            for j in range(cols):
                filled[i, j] = planes[b, i, j] if valid[i, j] else mean
        # along the rows (axis 0), the edge row repeated beyond the block
        for i in range(rows):
            for j in range(cols):
                line[j] = 0.0
            for k in range(-r, r + 1):
                src = min(max(i + k, 0), rows - 1)
                wk = w[k + r]
                for j in range(cols):
                    line[j] += wk * filled[src, j]
            for j in range(cols):
                tmp[i, j] = line[j]
        # along the columns (axis 1): the same line sums along each row, the edge column repeated
        for i in range(rows):
            for j in range(cols):
                line[j] = 0.0
            for k in range(-r, r + 1):
                wk = w[k + r]
                lo, hi = max(0, -k), min(cols, cols - k)  # columns whose neighbour j + k lies inside
                near = tmp[i, lo + k:hi + k]  # a view: indices from range() let the loop vectorise
                part = line[lo:hi]
                for j in range(hi - lo):
                    part[j] += wk * near[j]
                for j in range(0, lo):
                    line[j] += wk * tmp[i, 0]
                for j in range(hi, cols):
                    line[j] += wk * tmp[i, cols - 1]
            for j in range(cols):
                smooth[i, j] = line[j]
        half = 0.5 / scale
        for i in range(1, rows - 1):
            for j in range(1, cols - 1):
                gx = (np.float64(smooth[i, j + 1]) - smooth[i, j - 1]) * half
                gy = (np.float64(smooth[i + 1, j]) - smooth[i - 1, j]) * half
                mag2 = gx * gx + gy * gy
                inv = 1.0 / np.sqrt(mag2) if mag2 > 0 else 0.0
                d_re = (gx * gx - gy * gy) * inv
                d_im = 2.0 * gx * gy * inv
                ok = np.isfinite(d_re) and np.isfinite(d_im)
                out_re[i - 1, j - 1] += np.float32(d_re) if ok else np.float32(0.0)
                out_im[i - 1, j - 1] += np.float32(d_im) if ok else np.float32(0.0)


@njit(cache=True, nogil=True)
def all_finite(planes, out):  # pragma: no cover - compiled
    """``out[i, j]``: every band of ``planes[:, i, j]`` is finite (one pass, any strides)."""
    n_b, rows, cols = planes.shape
    for i in range(rows):
        for j in range(cols):
            ok = True
            for b in range(n_b):
                if not np.isfinite(planes[b, i, j]):
                    ok = False
                    break
            out[i, j] = ok
