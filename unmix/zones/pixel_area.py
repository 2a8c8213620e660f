"""Pixel areas on the ground [m^2]: from the affine transform of a projected grid, and exact
ellipsoidal areas of the cells of a geographic (longitude / latitude) grid.

A cell of a north-up geographic grid is bounded by two meridians and two parallels. Its area on an
ellipsoid of revolution has a closed form through the authalic-latitude function ``q(phi)``, so the
area of every pixel of a row is the same and exact (no degrees taken as metres, no planar
approximation).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError

__all__ = ["planar_pixel_area", "ellipsoidal_row_areas"]


def planar_pixel_area(transform, metres_per_unit: float = 1.0) -> float:
    """Area of one pixel of a projected grid [m^2]: ``|a e - b d|`` times the unit's size squared.

    Parameters
    ----------
    transform : sequence of 6 floats
        ``(a, b, c, d, e, f)`` as in ``affine.Affine`` / rasterio.
    metres_per_unit : float
        Length of the CRS's linear unit [m] (1 for metres, 0.3048 for the international foot).

    Returns
    -------
    float
        Map area of one pixel [m^2] (the projection's scale distortion is not removed: areas of a
        projected grid are map areas, as is common practice for a UTM or an equal-area grid).

    Examples
    --------
    >>> planar_pixel_area((30.0, 0.0, 500000.0, 0.0, -30.0, 4000000.0))
    900.0
    """
    a, b, _, d, e, _ = (float(v) for v in tuple(transform)[:6])
    return abs(a * e - b * d) * float(metres_per_unit) ** 2


def _q(phi: np.ndarray, ecc: float) -> np.ndarray:
    """Authalic-latitude function: the area from the equator to ``phi`` is ``dlambda b^2 q(phi) / 2``."""
    s = np.sin(phi)
    if ecc == 0.0:
        return 2.0 * s
    es = ecc * s
    return s / (1.0 - es * es) + np.log((1.0 + es) / (1.0 - es)) / (2.0 * ecc)


def ellipsoidal_row_areas(transform, n_rows: int, *, semi_major: float, inverse_flattening: float,
                          radians_per_unit: float = np.pi / 180.0) -> np.ndarray:
    """Exact area of one pixel of each row of a north-up longitude / latitude grid [m^2].

    The cell of row ``r`` lies between the parallels ``f + e r`` and ``f + e (r + 1)`` and spans
    ``|a|`` in longitude; its area on the ellipsoid is

        ``A = |dlambda| b^2 |q(phi2) - q(phi1)| / 2``,
        ``q(phi) = sin(phi) / (1 - e^2 sin^2 phi) + ln((1 + e sin phi) / (1 - e sin phi)) / (2 e)``

    with ``b`` the semi-minor axis and ``e`` the first eccentricity (the zone area of an ellipsoid of
    revolution, e.g. Snyder 1987 eq. 3-12 for ``q``). The result agrees with Karney's (2013) geodesic
    polygon areas of the same cells (pyproj's ``Geod.polygon_area_perimeter`` with densified
    parallels; ``tests/test_zones_pixel_area.py``).

    Parameters
    ----------
    transform : sequence of 6 floats
        ``(a, b, c, d, e, f)``: longitude = a col + c, latitude = e row + f, in the CRS's angular
        unit; ``b`` and ``d`` must be 0 (a north-up grid).
    n_rows : int
        Rows of the grid.
    semi_major : float
        Semi-major axis of the ellipsoid [m].
    inverse_flattening : float
        ``1 / f`` of the ellipsoid (0 or inf for a sphere).
    radians_per_unit : float
        Size of the CRS's angular unit [rad] (pi / 180 for degrees).

    Returns
    -------
    (n_rows,) float64 ndarray
        Area of one pixel of each row [m^2]; NaN for a row that reaches past a pole.

    Raises
    ------
    InputError
        The grid is rotated or sheared.

    References
    ----------
    Karney, C. F. F. (2013). Algorithms for geodesics. Journal of Geodesy, 87, 43-55.
    doi:10.1007/s00190-012-0578-z

    Snyder, J. P. (1987). Map projections: a working manual. USGS Professional Paper 1395.
    doi:10.3133/pp1395

    Examples
    --------
    >>> ellipsoidal_row_areas((1.0, 0.0, 0.0, 0.0, -1.0, 1.0), 1, semi_major=6378137.0,
    ...                       inverse_flattening=298.257223563).round(-6) / 1e6  # km^2, 1 x 1 degree
    array([12308.])
    """
    a, b, _, d, e, f = (float(v) for v in tuple(transform)[:6])
    if b != 0.0 or d != 0.0:
        raise InputError(
            "the geographic grid is rotated or sheared (transform terms b, d not 0); pixel areas are defined "
            "here for north-up longitude / latitude grids only: warp the raster to a north-up grid"
        )
    flat = 0.0 if not inverse_flattening or not np.isfinite(inverse_flattening) else 1.0 / float(inverse_flattening)
    ecc = float(np.sqrt(flat * (2.0 - flat)))
    semi_minor = float(semi_major) * (1.0 - flat)
    edges = (f + e * np.arange(n_rows + 1, dtype=np.float64)) * float(radians_per_unit)
    bad = np.abs(edges) > np.pi / 2 + 1e-12
    q = _q(np.clip(edges, -np.pi / 2, np.pi / 2), ecc)
    dlon = abs(a) * float(radians_per_unit)
    area = dlon * semi_minor**2 * np.abs(np.diff(q)) / 2.0
    area[bad[:-1] | bad[1:]] = np.nan
    return area
