"""Pixel areas and the area where a rule map is true."""

from __future__ import annotations

import numpy as np

__all__ = ["pixel_area", "rule_area"]


def pixel_area(transform) -> float:
    """Area of one pixel [map units^2, m^2 for projected CRSs] from an affine transform.

    Parameters
    ----------
    transform : sequence of 6 floats
        ``(a, b, c, d, e, f)`` as in ``affine.Affine`` / rasterio (x = a col + b row + c, y = d col + e row + f).

    Returns
    -------
    float
        ``|a e - b d|``.

    Examples
    --------
    >>> pixel_area((30.0, 0.0, 500000.0, 0.0, -30.0, 4000000.0))
    900.0
    """
    a, b, _, d, e, _ = (float(v) for v in tuple(transform)[:6])
    return abs(a * e - b * d)


def rule_area(mask, pixel_area_m2: float) -> tuple[int, float, float]:
    """Pixel count, area [ha] and share of the valid pixels where a rule map is true.

    Parameters
    ----------
    mask : (...) uint8 ndarray
        Rule map from :func:`evaluate_rules` (1 true, 0 false, 255 no data) or a boolean map.
    pixel_area_m2 : float
        Area of one pixel [m^2].

    Returns
    -------
    count : int
    area_ha : float
        ``count * pixel_area_m2 / 10000`` [ha].
    share : float
        ``count / valid pixels`` [0..1] (NaN when no pixel is valid).

    Examples
    --------
    >>> import numpy as np
    >>> rule_area(np.array([1, 1, 0, 255], dtype=np.uint8), 900.0)
    (2, 0.18, 0.6666666666666666)
    """
    mask = np.asarray(mask)
    count = int(np.count_nonzero(mask == 1))
    valid = int(np.count_nonzero(mask <= 1)) if mask.dtype != bool else mask.size
    share = count / valid if valid else float("nan")
    return count, count * float(pixel_area_m2) / 10000.0, share
