"""Georeferencing of labelled cubes: CRS and affine transform from a ``spatial_ref`` coordinate,
attributes or the x/y coordinates, and the pixel area. No paths are opened here."""

from __future__ import annotations

import numpy as np
import xarray as xr

__all__ = ["georef_attrs", "georef_of", "pixel_area_m2", "pixel_area_rows", "transform_from_coords"]


def transform_from_coords(obj: xr.Dataset | xr.DataArray) -> tuple[float, ...] | None:
    """Affine (a, b, c, d, e, f) from regularly spaced pixel-centre ``x``/``y`` coordinates."""
    if "x" not in obj.coords or "y" not in obj.coords:
        return None
    x = np.asarray(obj["x"].values, dtype="float64")
    y = np.asarray(obj["y"].values, dtype="float64")
    if x.size < 2 or y.size < 2:
        return None
    dx = (x[-1] - x[0]) / (x.size - 1)
    dy = (y[-1] - y[0]) / (y.size - 1)
    return (dx, 0.0, x[0] - dx / 2, 0.0, dy, y[0] - dy / 2)


def georef_of(obj: xr.Dataset | xr.DataArray) -> tuple[str | None, tuple[float, ...] | None]:
    """(crs_wkt, transform) found on ``obj``: ``spatial_ref`` coordinate first, then attributes."""
    wkt = None
    transform = None
    if "spatial_ref" in obj.coords:
        sr = obj.coords["spatial_ref"].attrs
        wkt = sr.get("crs_wkt") or sr.get("spatial_ref")
        gt = sr.get("GeoTransform")
        if gt:
            c, a, b, f, d, e = (float(v) for v in str(gt).split())
            transform = (a, b, c, d, e, f)
    variables = [obj] if isinstance(obj, xr.DataArray) else [obj, *obj.data_vars.values()]
    for item in variables:
        if wkt is None and item.attrs.get("crs_wkt"):
            wkt = item.attrs["crs_wkt"]
        if transform is None and item.attrs.get("transform") is not None:
            transform = tuple(float(v) for v in np.ravel(item.attrs["transform"])[:6])
    if transform is None:
        transform = transform_from_coords(obj)
    return wkt, transform


def georef_attrs(obj: xr.Dataset | xr.DataArray) -> dict:
    """``crs_wkt`` and ``transform`` of :func:`georef_of` as attributes for gridded variables (the ones
    known only)."""
    wkt, transform = georef_of(obj)
    return {k: v for k, v in (("crs_wkt", wkt), ("transform", transform)) if v is not None}


def _crs_units(wkt: str):
    """(pyproj CRS, size of its first axis unit in metres or radians) of a WKT, or (None, None)."""
    try:
        import pyproj

        crs = pyproj.CRS.from_wkt(wkt)
    except Exception:  # an unreadable WKT: the caller falls back to metres
        return None, None
    axes = crs.axis_info
    factor = float(axes[0].unit_conversion_factor) if axes else None
    return crs, factor


def pixel_area_rows(obj) -> tuple[np.ndarray, str]:
    """Ground area of one pixel of each row [m^2], and a note on how it was found.

    A projected CRS gives ``|a e - b d|`` from the transform in square metres (the CRS's linear unit
    converted); a geographic CRS gives the exact ellipsoidal area of each row's cells
    (:func:`unmix.zones.ellipsoidal_row_areas`), which shrinks with latitude; a grid without a CRS
    takes its map units as metres (the note says so).

    Parameters
    ----------
    obj : xarray.Dataset or DataArray
        Anything :func:`georef_of` reads, with a ``y`` dimension.

    Returns
    -------
    area : (ny,) float64 ndarray
        Area of one pixel of each row [m^2]; all NaN when the pixel size is unknown.
    note : str

    References
    ----------
    Karney, C. F. F. (2013). Algorithms for geodesics. Journal of Geodesy, 87, 43-55.
    doi:10.1007/s00190-012-0578-z
    """
    from ..zones import ellipsoidal_row_areas, planar_pixel_area

    ny = int(obj.sizes["y"]) if "y" in obj.sizes else 1
    wkt, transform = georef_of(obj)
    if transform is None:
        return np.full(ny, np.nan), "unknown pixel size (fewer than 2 pixels along x or y and no transform)"
    crs, factor = _crs_units(wkt) if wkt else (None, None)
    if crs is not None and crs.is_geographic:
        ell = crs.ellipsoid
        try:
            areas = ellipsoidal_row_areas(transform, ny, semi_major=ell.semi_major_metre,
                                          inverse_flattening=ell.inverse_flattening,
                                          radians_per_unit=factor or np.pi / 180.0)
        except Exception as exc:  # a rotated geographic grid
            return np.full(ny, np.nan), f"geographic CRS: {exc}"
        return areas, (f"geographic CRS: exact cell areas on the {ell.name} ellipsoid, per row "
                       "(latitudes past a pole give no area)")
    if crs is not None and factor:
        area = planar_pixel_area(transform, factor)
        return np.full(ny, area), "pixel area from the grid transform of the projected CRS"
    return np.full(ny, planar_pixel_area(transform)), "pixel area from the grid transform, map units taken as metres"


def pixel_area_m2(ds) -> tuple[float, str]:
    """Area of one pixel [m^2] when all pixels have the same area, and a note on how it was found.

    NaN for a geographic CRS, whose pixel areas change with latitude: use :func:`pixel_area_rows`.
    """
    areas, note = pixel_area_rows(ds)
    if areas.size and np.all(areas == areas[0]):
        return float(areas[0]), note
    return float("nan"), note + "; the area differs between rows: use pixel_area_rows"
