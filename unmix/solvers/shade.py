"""Shade normalisation of fractions."""

from __future__ import annotations

import numpy as np

from ..errors import InputError, ShapeError

__all__ = ["shade_normalize"]


def shade_normalize(fractions, shade):
    """Fractions of the non-shade endmembers rescaled to sum as if there were no shade.

    Parameters
    ----------
    fractions : (..., n_endmembers) array_like
        Fractions including a shade endmember [1].
    shade : int
        Index of the shade endmember on the last axis (negative counts from the end).

    Returns
    -------
    normalized : (..., n_endmembers - 1) ndarray
        ``f_i / (1 - f_shade)`` for every other endmember, in their original order [1]; NaN where
        ``f_shade >= 1`` (nothing but shade) and where an input is NaN. float32 stays float32,
        anything else gives float64.

    References
    ----------
    Adams, J. B., Sabol, D. E., Kapos, V., Almeida Filho, R., Roberts, D. A., Smith, M. O. &
    Gillespie, A. R. (1995). Classification of multispectral images based on fractions of endmembers:
    application to land-cover change in the Brazilian Amazon. Remote Sensing of Environment 52,
    137-154. https://doi.org/10.1016/0034-4257(94)00098-8 (from memory)

    Examples
    --------
    >>> shade_normalize([0.45, 0.25, 0.30], shade=2).round(6).tolist()
    [0.642857, 0.357143]
    """
    f = np.asarray(fractions)
    if f.dtype.kind not in "biuf":
        raise InputError(f"fractions must be real numbers, got dtype {f.dtype}")
    if f.ndim < 1 or f.shape[-1] < 2:
        raise ShapeError(
            f"fractions must have at least two endmembers on the last axis, got shape {f.shape}"
        )
    f = f.astype(np.float32 if f.dtype == np.float32 else np.float64, copy=False)
    p = f.shape[-1]
    if isinstance(shade, (bool, np.bool_)) or not isinstance(shade, (int, np.integer)):
        raise InputError(f"shade must be the integer index of the shade endmember, got {shade!r}")
    if not -p <= int(shade) < p:
        raise InputError(f"shade index {int(shade)} is out of range for {p} endmembers (use 0..{p - 1})")
    s = int(shade) % p
    fs = f[..., s]
    others = np.delete(f, s, axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = others / (1 - fs)[..., None]
    out[fs >= 1] = np.nan
    return out
