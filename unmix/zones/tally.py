"""Area of each class inside each zone: weighted counts of a class map, one block at a time.

The kernel behind every per-zone area table (trajectories, rule maps, cover classes and their
from-to changes). A block of a class map, the zone weights of the same pixels (1 / 0 by pixel
centre, or the share of the pixel inside the zone) and the ground area of each pixel give the area
of every (zone, class) pair; blocks add up, so a map of any size is tallied chunk by chunk.
"""

from __future__ import annotations

import numpy as np

from ..errors import ShapeError

__all__ = ["zone_class_tally"]


def zone_class_tally(codes, n_classes: int, weights, pixel_area) -> np.ndarray:
    """Pixels and area of each class in each zone layer of one block.

    Parameters
    ----------
    codes : (h, w) int ndarray
        Class codes ``0 .. n_classes - 1``; any other value (a negative no-data code, for one) is
        tallied in the extra last column.
    n_classes : int
        Number of classes.
    weights : (n_layers, h, w) float ndarray
        Membership of each pixel in each zone layer, 0..1 (share of the pixel's area inside it).
    pixel_area : (h, w) or (h, 1) float ndarray
        Ground area of each pixel [m^2] (NaN where unknown).

    Returns
    -------
    (2, n_layers, n_classes + 1) float64 ndarray
        ``[0]``: pixels (weighted by the zone share), ``[1]``: area [m^2]; the last column is the
        no-data tally.

    Examples
    --------
    >>> codes = np.array([[0, 1], [1, -1]])
    >>> w = np.ones((1, 2, 2))
    >>> zone_class_tally(codes, 2, w, np.full((2, 2), 900.0))[1].tolist()
    [[900.0, 1800.0, 900.0]]
    """
    codes = np.asarray(codes)
    weights = np.asarray(weights, dtype=np.float64)
    if weights.ndim != 3 or weights.shape[1:] != codes.shape:
        raise ShapeError(f"zone weights must be (n_layers, {codes.shape[0]}, {codes.shape[1]}); got {weights.shape}")
    area = np.broadcast_to(np.asarray(pixel_area, dtype=np.float64), codes.shape)
    idx = codes.astype(np.int64, copy=True).ravel()
    idx[(idx < 0) | (idx >= n_classes)] = n_classes
    area = area.ravel()
    out = np.zeros((2, weights.shape[0], n_classes + 1), dtype=np.float64)
    for layer in range(weights.shape[0]):
        w = weights[layer].ravel()
        inside = w > 0
        if not inside.any():
            continue
        out[0, layer] = np.bincount(idx[inside], weights=w[inside], minlength=n_classes + 1)
        out[1, layer] = np.bincount(idx[inside], weights=w[inside] * area[inside], minlength=n_classes + 1)
    return out
