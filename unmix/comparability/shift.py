"""Sub-pixel resampling of a date by a measured shift (sign convention of :mod:`.registration`)."""

from __future__ import annotations

import numpy as np
from scipy import ndimage

__all__ = ["shift_image"]


def shift_image(image: np.ndarray, dy: float, dx: float, *, order: int = 3) -> np.ndarray:
    """Resample ``image`` (last two axes rows, cols) by a sub-pixel shift ``(dy, dx)``.

    Spline interpolation (:func:`scipy.ndimage.shift`, ``order`` 1 or 3). NaN stays honest: a pixel whose
    interpolation footprint touched a missing pixel, or the outside of the image, is NaN (for cubic
    splines the footprint is widened by one pixel, where their ringing reaches).

    Parameters
    ----------
    image : (..., rows, cols) ndarray
    dy, dx : float
        Shift [pixel] in this package's convention (the shift that aligns a moving date to the reference).
    order : {1, 3}

    Returns
    -------
    (..., rows, cols) ndarray of the input's float dtype

    Examples
    --------
    >>> import numpy as np
    >>> shift_image(np.arange(5.0)[None, :], 0, 1, order=1)
    array([[nan,  0.,  1.,  2.,  3.]])
    """
    if order not in (1, 3):
        raise ValueError(f"order must be 1 or 3, got {order}")
    image = np.asarray(image)
    dtype = image.dtype if np.issubdtype(image.dtype, np.floating) else np.float64
    if dy == 0 and dx == 0:
        return image.astype(dtype, copy=True)
    if not (np.isfinite(dy) and np.isfinite(dx)):
        return np.full(image.shape, np.nan, dtype=dtype)
    flat = image.reshape((-1,) + image.shape[-2:]).astype(np.float64)
    out = np.empty(flat.shape, dtype=np.float64)
    for k, plane in enumerate(flat):
        valid = np.isfinite(plane)
        fill = plane[valid].mean() if valid.any() else 0.0
        moved = ndimage.shift(np.where(valid, plane, fill), (dy, dx), order=order, mode="nearest")
        bad = ndimage.shift((~valid).astype(np.float64), (dy, dx), order=1, mode="constant", cval=1.0) > 1e-6
        if order == 3:
            bad = ndimage.binary_dilation(bad, iterations=1)
        moved[bad] = np.nan
        out[k] = moved
    return out.reshape(image.shape).astype(dtype, copy=False)
