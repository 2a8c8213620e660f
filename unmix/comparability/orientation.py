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

__all__ = ["SIGMA", "noise_sd", "orientation_field"]

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
    second = np.array([1.0, -2.0, 1.0])  # N is the outer product of two second differences
    resp = np.abs(ndimage.correlate1d(ndimage.correlate1d(image, second, axis=0, mode="nearest"), second,
                                      axis=1, mode="nearest"))
    inner = ndimage.binary_erosion(valid, iterations=1, border_value=0)
    return float(np.sqrt(np.pi / 2) * resp[inner].mean() / 6.0) if inner.any() else 0.0


def orientation_field(image: np.ndarray, valid: np.ndarray, *, sigma: float = SIGMA) -> np.ndarray:
    """Sign-free gradient field of one date summed over its bands, zero where it is not defined.

    Per band: Gaussian-derivative gradient ``g = gx + i gy`` (scale ``sigma`` [pixel]), divided by the band's
    noise standard deviation (Immerkaer 1996) so each band enters in signal-to-noise units, then put in the
    double-angle form ``g^2 / |g|`` (Granlund 1978): the orientation of an edge is kept, its sign is not,
    so an edge whose contrast inverted between the dates (a field cleared, wet and dry seasons, bands
    whose contrasts run opposite) still matches. Gradients rather than levels make the correlation blind
    to the broad changes of level that real cover change and seasons bring (Argyriou and Vlachos 2003).
    Pixels within ``3 sigma`` of no data (or of the block's edge) are zero, so filled gaps make no edges
    and each date can be transformed once, with its own gaps.

    Parameters
    ----------
    image : (rows, cols) or (bands, rows, cols) ndarray
    valid : (rows, cols) bool ndarray
        Valid pixels of the date (every band finite); the others are filled before filtering.
    sigma : float

    Returns
    -------
    (rows, cols) complex ndarray

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
    >>> bool(np.allclose(a, b)), bool(a[8, 7].real > 0)
    (True, True)
    """
    image = np.asarray(image, dtype=np.float64)
    planes = image[None] if image.ndim == 2 else image
    # the filters reach 3 sigma (truncated there); a pixel whose square footprint touches a filled gap or
    # the block's edge is zero, so the fill makes no edges of its own
    reach = int(3.0 * sigma + 0.5)
    inside = ndimage.binary_erosion(valid, structure=np.ones((3, 3), bool), iterations=reach, border_value=0)
    out = np.zeros(planes.shape[1:], dtype=np.complex128)
    for plane in planes:
        filled = np.where(valid, plane, plane[valid].mean())
        noise = noise_sd(filled, valid)
        if noise <= 0:
            continue
        g = (ndimage.gaussian_filter(filled, sigma, order=(0, 1), truncate=3.0)
             + 1j * ndimage.gaussian_filter(filled, sigma, order=(1, 0), truncate=3.0)) / noise
        mag = np.abs(g)
        out += np.where(mag > 0, g * g / np.where(mag > 0, mag, 1.0), 0.0)
    out[~inside] = 0.0
    return out
