"""Georeferencing of labelled cubes: CRS and affine transform from a ``spatial_ref`` coordinate,
attributes or the x/y coordinates, and the pixel area. No paths are opened here."""

from __future__ import annotations

import numpy as np
import xarray as xr

__all__ = ["georef_of", "pixel_area_m2", "transform_from_coords"]


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


def pixel_area_m2(ds) -> tuple[float, str]:
    """Pixel area [m^2] from the grid mapping / transform / x-y spacing, and a note on how it was found."""
    wkt, transform = georef_of(ds)
    if transform is None:
        return float("nan"), "unknown pixel size (fewer than 2 pixels along x or y and no transform)"
    if wkt:
        try:
            from rasterio.crs import CRS

            if CRS.from_wkt(wkt).is_geographic:
                return float("nan"), "geographic CRS (degrees): reproject to a projected CRS for areas"
        except Exception:  # an unreadable WKT: fall back to assuming metres
            pass
    from ..trajectory.areas import pixel_area

    return pixel_area(transform), "pixel area from the grid transform, map units taken as metres"
