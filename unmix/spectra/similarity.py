"""Spectral similarity: the spectral angle between spectra."""

from __future__ import annotations

import numpy as np

from ..errors import ShapeError

__all__ = ["spectral_angle"]


def spectral_angle(a, b) -> np.ndarray:
    """Spectral angle between spectra, core dimension last, broadcasting over leading dimensions.

    angle = arccos(a.b / (|a| |b|)), computed in the numerically stable form
    2 atan2(|u - v|, |u + v|) with u = a/|a|, v = b/|b|.

    Parameters
    ----------
    a, b : (..., n_bands) array_like
        Spectra; leading dimensions broadcast against each other.

    Returns
    -------
    (...) ndarray
        Angle [rad], 0..pi. NaN where either spectrum has NaN or zero length. float32 if both inputs
        are float32, else float64.

    References
    ----------
    Kruse, F. A., Lefkoff, A. B., Boardman, J. W., Heidebrecht, K. B., Shapiro, A. T., Barloon, P. J.,
    and Goetz, A. F. H. (1993). The spectral image processing system (SIPS) -- interactive visualization
    and analysis of imaging spectrometer data. Remote Sensing of Environment 44(2-3), 145-163.
    https://doi.org/10.1016/0034-4257(93)90013-N

    Kahan, W. (2006). How futile are mindless assessments of roundoff in floating-point computation?
    (section 12, the stable angle formula).

    Examples
    --------
    >>> float(spectral_angle([1.0, 0.0], [0.0, 2.0])) == np.pi / 2
    True
    >>> float(spectral_angle([0.1, 0.2, 0.3], [0.2, 0.4, 0.6]))
    0.0
    """
    a = np.asarray(a)
    b = np.asarray(b)
    out_dtype = np.float32 if (a.dtype == np.float32 and b.dtype == np.float32) else np.float64
    a = a.astype(np.float64, copy=False)
    b = b.astype(np.float64, copy=False)
    if a.ndim == 0 or b.ndim == 0 or a.shape[-1] != b.shape[-1]:
        raise ShapeError(
            f"spectra must share their last (band) dimension, got shapes {a.shape} and {b.shape}"
        )
    with np.errstate(invalid="ignore", divide="ignore"):
        u = a / np.linalg.norm(a, axis=-1, keepdims=True)
        v = b / np.linalg.norm(b, axis=-1, keepdims=True)
        ang = 2.0 * np.arctan2(np.linalg.norm(u - v, axis=-1), np.linalg.norm(u + v, axis=-1))
    return np.asarray(ang, dtype=out_dtype)
