"""Sign-free gradient fields of a date's bands, the features co-registration correlates.

References
----------
Granlund, G. H. (1978). In search of a general picture processing operator. Computer Graphics and Image
Processing 8(2), 155-173. doi:10.1016/0146-664X(78)90047-3
Argyriou, V. and Vlachos, T. (2003). Estimation of sub-pixel motion using gradient cross-correlation.
Electronics Letters 39(13), 980-982. doi:10.1049/el:20030666
Immerkaer, J. (1996). Fast noise variance estimation. Computer Vision and Image Understanding 64(2),
300-302. doi:10.1006/cviu.1996.0060
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from ._orientation_numba import all_finite, orientation_sum

__all__ = ["SIGMA", "band_noise", "inside_mask", "noise_sd", "orientation_field", "valid_pixels"]

#: Scale of the Gaussian-derivative gradients [pixel]: smooths sensor noise, keeps edges one pixel apart.
SIGMA = 1.0


def noise_sd(image: np.ndarray, valid: np.ndarray) -> float:
    """Noise standard deviation of one image from its Laplacian-difference mask (Immerkaer 1996):
    ``sqrt(pi / 2) * mean |N * I| / 6`` over valid pixels, ``N = [[1, -2, 1], [-2, 4, -2], [1, -2, 1]]``.

    The mask is blind to planes and to smooth ground, so the estimate is the sensor noise plus a little of
    the texture; pixels next to missing ones are left out.

    References
    ----------
    Immerkaer, J. (1996). Fast noise variance estimation. Computer Vision and Image Understanding 64(2),
    300-302. doi:10.1006/cviu.1996.0060

    Examples
    --------
    >>> import numpy as np
    >>> img = np.random.default_rng(0).normal(0, 0.01, (200, 200))
    >>> round(noise_sd(img, np.ones(img.shape, bool)), 3)
    0.01
    """
    # N is the outer product of two second differences: taken by slicing, on the interior pixels
    rows = image[:-2] - 2 * image[1:-1] + image[2:]
    resp = np.abs(rows[:, :-2] - 2 * rows[:, 1:-1] + rows[:, 2:])
    inner = valid[1:-1, 1:-1] if valid.all() else ndimage.minimum_filter(
        valid.view(np.uint8), size=3, mode="constant", cval=0)[1:-1, 1:-1].astype(bool)
    return float(np.sqrt(np.pi / 2) * resp[inner].mean(dtype=np.float64) / 6.0) if inner.any() else 0.0


def band_noise(image: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """:func:`noise_sd` of each band of a (bands, rows, cols) block (gaps filled with the band's mean)."""
    planes = np.asarray(image)
    planes = planes[None] if planes.ndim == 2 else planes
    return np.array([noise_sd(np.where(valid, p, p[valid].mean()).astype(np.float32), valid) for p in planes])


def orientation_field(image: np.ndarray, valid: np.ndarray, *, sigma: float = SIGMA,
                      noise: np.ndarray | None = None) -> np.ndarray:
    """Sign-free gradient field of one date summed over its bands, zero where it is not defined.

    Per band: Gaussian-derivative gradient ``g = gx + i gy`` (scale ``sigma`` [pixel]), divided by the band's
    noise standard deviation (Immerkaer 1996) so each band enters in signal-to-noise units, then put in the
    double-angle form ``g^2 / |g|`` (Granlund 1978): the orientation of an edge is kept, its sign is not,
    so an edge whose contrast inverted between the dates (a field cleared, wet and dry seasons, bands
    whose contrasts run opposite) still matches. Gradients rather than levels make the correlation blind
    to the broad changes of level that real cover change and seasons bring (Argyriou and Vlachos 2003).
    Pixels outside :func:`inside_mask` (near no data or the block's edge) are zero, so filled gaps make
    no edges and each date can be transformed once, with its own gaps. Planes and result in single precision
    (the compiled kernel :func:`unmix.comparability._orientation_numba.orientation_sum`).

    Parameters
    ----------
    image : (rows, cols) or (bands, rows, cols) ndarray
    valid : (rows, cols) bool ndarray
        Valid pixels of the date (every band finite); the others are filled before filtering.
    sigma : float
    noise : (bands,) ndarray, optional
        Noise standard deviation of each band (default: :func:`band_noise` of this block). Pass the
        reference's to every date, so both fields of a pair weigh the bands alike.

    Returns
    -------
    (rows, cols) complex64 ndarray

    References
    ----------
    Granlund, G. H. (1978). doi:10.1016/0146-664X(78)90047-3
    Argyriou, V. and Vlachos, T. (2003). doi:10.1049/el:20030666
    Immerkaer, J. (1996). doi:10.1006/cviu.1996.0060

    Examples
    --------
    >>> import numpy as np
    >>> step = np.repeat((np.arange(16) >= 8)[None].astype(float), 16, axis=0)  # a vertical edge
    >>> step += np.random.default_rng(0).normal(0, 0.01, step.shape)  # and sensor noise
    >>> valid = np.ones(step.shape, bool)
    >>> a, b = orientation_field(step, valid), orientation_field(1 - step, valid)  # and its inversion
    >>> bool(np.allclose(a, b, rtol=1e-3, atol=1e-3)), bool(a[8, 7].real > 0)  # single precision
    (True, True)
    """
    image = np.asarray(image)
    planes = image[None] if image.ndim == 2 else image
    inside = inside_mask(valid, sigma)
    rows, cols = planes.shape[1:]
    re = np.zeros((rows - 2, cols - 2), dtype=np.float32)  # the double-angle field, interior pixels
    im = np.zeros((rows - 2, cols - 2), dtype=np.float32)
    noise = band_noise(planes, valid) if noise is None else np.asarray(noise, dtype=np.float64)
    # smoothed once, then central differences: the Gaussian-derivative gradient up to the difference
    # operator, at a third of the filtering cost; taps as scipy.ndimage.gaussian_filter(truncate=3) samples
    # them, so the kernel stops at 3 sigma
    radius = int(3.0 * sigma + 0.5)
    taps = np.exp(-0.5 * (np.arange(-radius, radius + 1) / sigma) ** 2)
    orientation_sum(planes.astype(np.float32, copy=False), np.ascontiguousarray(valid, dtype=bool),
                    np.ascontiguousarray(noise, dtype=np.float64), taps / taps.sum(), re, im)
    out = np.zeros((rows, cols), dtype=np.complex64)
    out.real[1:-1, 1:-1] = re
    out.imag[1:-1, 1:-1] = im
    out[~inside] = 0.0
    return out


def valid_pixels(image: np.ndarray) -> np.ndarray:
    """Pixels of a (rows, cols) or (bands, rows, cols) block where every band is finite.

    The same as ``np.isfinite(image).all(axis=0)``, in one pass without a temporary per band (blocks
    from the stack reader keep a pixel's bands side by side, which numpy's reduction reads slowly).

    Examples
    --------
    >>> import numpy as np
    >>> valid_pixels(np.array([[[1.0, np.nan]], [[2.0, 3.0]]])).tolist()
    [[True, False]]
    """
    image = np.asarray(image)
    planes = image[None] if image.ndim == 2 else image
    out = np.empty(planes.shape[1:], dtype=bool)
    if planes.dtype.kind != "f":
        out[:] = True
        return out
    all_finite(planes, out)
    return out


def inside_mask(valid: np.ndarray, sigma: float = SIGMA) -> np.ndarray:
    """Valid pixels whose footprint in :func:`orientation_field` (3 sigma, plus the difference) holds no
    gap and stays inside the block: the square erosion of ``valid`` by ``round(3 sigma) + 1`` pixels.

    Examples
    --------
    >>> import numpy as np
    >>> int(inside_mask(np.ones((12, 12), bool), 1.0).sum())  # 12 - 2 x 4 pixels a side
    16
    """
    reach = int(3.0 * sigma + 0.5) + 1
    if valid.all():  # the usual block without gaps: only the frame goes
        inside = np.zeros(valid.shape, bool)
        inside[reach:-reach, reach:-reach] = True
        return inside
    # a square erosion by (2 reach + 1) pixels is a running minimum along each axis
    return ndimage.minimum_filter(valid.view(np.uint8), size=2 * reach + 1, mode="constant", cval=0).astype(bool)
