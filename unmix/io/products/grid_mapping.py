"""CF grid-mapping and x/y coordinate attributes that GDAL and rioxarray both read.

Used by the product writers and by :mod:`unmix.io.stack`.
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["grid_mapping_attrs", "xy_attrs"]


def grid_mapping_attrs(crs: Any, transform: Any) -> dict[str, Any]:
    """Attributes of a CF grid-mapping variable that GDAL and rioxarray both understand.

    Parameters
    ----------
    crs : rasterio.crs.CRS, str (WKT, ``EPSG:xxxx``) or None
    transform : affine.Affine or sequence of 6 floats (a, b, c, d, e, f) or None

    Returns
    -------
    dict
        ``crs_wkt`` and ``spatial_ref`` (the same WKT), ``GeoTransform`` (GDAL order
        ``c a b f d e`` as a space-separated string) and, when pyproj is importable, the CF
        grid-mapping parameters (``grid_mapping_name``...).

    Examples
    --------
    >>> from affine import Affine
    >>> attrs = grid_mapping_attrs("EPSG:32633", Affine(30, 0, 500000, 0, -30, 4000000))
    >>> attrs["GeoTransform"]
    '500000.0 30.0 0.0 4000000.0 0.0 -30.0'
    """
    attrs: dict[str, Any] = {}
    if crs is not None and str(crs) != "":
        from rasterio.crs import CRS

        crs_obj = crs if isinstance(crs, CRS) else CRS.from_user_input(crs)
        wkt = crs_obj.to_wkt()
        try:  # CF parameters are a courtesy for CF tools; WKT is what GDAL/rioxarray read.
            import pyproj

            cf = pyproj.CRS.from_wkt(wkt).to_cf()
            for key, value in cf.items():
                if key not in ("crs_wkt",) and isinstance(value, (str, int, float, np.number)):
                    attrs[key] = value
        except Exception:  # pragma: no cover - pyproj missing or CRS without CF form
            pass
        attrs["crs_wkt"] = wkt
        attrs["spatial_ref"] = wkt
    if transform is not None:
        t = tuple(float(v) for v in tuple(transform)[:6])
        a, b, c, d, e, f = t
        attrs["GeoTransform"] = " ".join(repr(v) for v in (c, a, b, f, d, e))
    return attrs


def xy_attrs(crs: Any) -> tuple[dict[str, str], dict[str, str]]:
    """CF attributes for the ``x`` and ``y`` coordinates of a grid in ``crs``.

    Returns
    -------
    (x_attrs, y_attrs) : tuple of dict
        ``projection_x_coordinate`` / ``projection_y_coordinate`` in the CRS's linear unit for a
        projected CRS, ``longitude`` / ``latitude`` in degrees for a geographic one.
    """
    if crs is None or str(crs) == "":
        return ({"long_name": "x coordinate of pixel centre"}, {"long_name": "y coordinate of pixel centre"})
    from rasterio.crs import CRS

    crs_obj = crs if isinstance(crs, CRS) else CRS.from_user_input(crs)
    if crs_obj.is_geographic:
        return (
            {"standard_name": "longitude", "long_name": "longitude of pixel centre", "units": "degrees_east", "axis": "X"},
            {"standard_name": "latitude", "long_name": "latitude of pixel centre", "units": "degrees_north", "axis": "Y"},
        )
    unit = "m"
    try:
        factors = crs_obj.linear_units_factor
        if factors and abs(float(factors[1]) - 1.0) > 1e-12:
            unit = str(factors[0])
    except Exception:  # pragma: no cover - some CRSs have no linear unit
        pass
    return (
        {"standard_name": "projection_x_coordinate", "long_name": "x coordinate of pixel centre", "units": unit, "axis": "X"},
        {"standard_name": "projection_y_coordinate", "long_name": "y coordinate of pixel centre", "units": unit, "axis": "Y"},
    )
