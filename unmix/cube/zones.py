"""Zones on a product grid and per-zone area tables (lazy, memory bounded by the chunk size).

Rasterising
-----------
Two ways, chosen with :class:`ZoneRaster`:

- ``centre``: a pixel belongs to a zone when its centre lies inside the polygon (GDAL's default
  rasterisation rule); every pixel counts whole, edges are right on average;
- ``share``: a pixel counts with the share of its area inside the zone, estimated from
  ``supersample x supersample`` sub-pixel centres (8 x 8 by default: shares in steps of 1/64), so
  the zone's area on the grid follows the polygon's area closely even for small zones.

Each zone is rasterised on its own, so overlapping zones each count the pixels they share; the
``all_zones`` row is the union of the zones (counted once) and ``outside_zones`` the rest of the map.
``whole_map`` is the whole grid, so ``all_zones + outside_zones = whole_map``, and the zones sum to
``all_zones`` when they do not overlap.

Areas are ground areas per pixel (:func:`unmix.cube.georef.pixel_area_rows`): square metres of the
projected grid, exact ellipsoidal areas per row for a longitude / latitude grid. Counting mapped pixels
gives "mapped areas"; their uncertainty needs a reference sample (Olofsson et al. 2014).

References
----------
Olofsson, P., Foody, G. M., Herold, M., Stehman, S. V., Woodcock, C. E., & Wulder, M. A. (2014).
Good practices for estimating area and assessing accuracy of land change. Remote Sensing of
Environment, 148, 42-57. doi:10.1016/j.rse.2014.02.015
"""

from __future__ import annotations

import enum
import threading
from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr

from ..errors import InputError
from ..zones import zone_class_tally
from .georef import georef_of, pixel_area_rows

__all__ = ["Zones", "ZoneRaster", "RESERVED_ZONES", "zone_weights", "zone_masks", "zone_area_table",
           "area_table_frame"]

#: Rows the tables add after the zones.
RESERVED_ZONES = ("all_zones", "outside_zones", "whole_map")
#: Column of the pixels without a class (no data).
NO_DATA = "no_data"
#: rasterio's rasterize, run from several dask threads at once, now and then emits a spurious
#: NotGeoreferencedWarning (results stay right: 1 in 5000 calls, 8 threads); the calls take
#: milliseconds, so they run one at a time per process.
_RASTERIZE_LOCK = threading.Lock()


class ZoneRaster(str, enum.Enum):
    """How zone polygons become pixels."""

    CENTRE = "centre"
    SHARE = "share"


@dataclass(frozen=True)
class Zones:
    """Named zone polygons in one CRS (:func:`unmix.io.zones.read_zones` makes them from a file)."""

    names: tuple[str, ...]
    geometries: tuple
    crs_wkt: str | None = None
    source: str = "<memory>"
    sha256: str = ""
    repaired: int = 0


def _window_transform(transform, row0: int, col0: int, scale: float = 1.0):
    from affine import Affine

    return Affine(*transform[:6]) @ Affine.translation(col0, row0) @ Affine.scale(scale)


def _weights_block(geoms, transform, row0, col0, h, w, mode: str, k: int) -> np.ndarray:
    """(n_geoms, h, w) float32 membership of a window of the grid."""
    import shapely
    from rasterio.features import rasterize

    scale = 1.0 if mode == ZoneRaster.CENTRE.value else 1.0 / k
    f = 1 if mode == ZoneRaster.CENTRE.value else k
    t = _window_transform(transform, row0, col0, scale)
    corners = [t @ (0, 0), t @ (w * f, 0), t @ (0, h * f), t @ (w * f, h * f)]
    xs, ys = zip(*corners)
    window = shapely.box(min(xs), min(ys), max(xs), max(ys))
    out = np.zeros((len(geoms), h, w), dtype=np.float32)
    for i, g in enumerate(geoms):
        if not g.intersects(window):
            continue
        with _RASTERIZE_LOCK:
            burnt = rasterize([(g, 1)], out_shape=(h * f, w * f), transform=t, fill=0, dtype="uint8")
        out[i] = burnt if f == 1 else burnt.reshape(h, f, w, f).mean(axis=(1, 3), dtype=np.float32)
    return out


def zone_weights(zones: Zones, like: xr.DataArray | xr.Dataset, mode: ZoneRaster | str = ZoneRaster.CENTRE,
                 supersample: int = 8) -> xr.DataArray:
    """Membership of every pixel of ``like``'s grid in each zone and in their union.

    Parameters
    ----------
    zones : Zones
        Polygons in the CRS of ``like``'s grid.
    like : xarray.DataArray or Dataset
        Anything on (y, x) with a transform (:func:`georef_of`); its dask chunks along y and x are
        kept, so the weights are computed one chunk at a time.
    mode : ZoneRaster or str
        ``centre`` or ``share`` (module docstring).
    supersample : int
        Sub-pixels per side for ``share``.

    Returns
    -------
    xarray.DataArray
        (zone, y, x) float32, 0..1; ``zone`` holds the zone names then ``all_zones``. Lazy when
        ``like`` is dask-backed.

    Examples
    --------
    >>> import shapely
    >>> grid = xr.DataArray(np.zeros((4, 4)), dims=("y", "x"),
    ...                     coords={"y": [3.5, 2.5, 1.5, 0.5], "x": [0.5, 1.5, 2.5, 3.5]})
    >>> z = Zones(("a",), (shapely.box(0, 0, 2, 2),))
    >>> zone_weights(z, grid).sel(zone="a").values.sum()
    np.float32(4.0)
    """
    import shapely

    mode = ZoneRaster(mode).value
    if int(supersample) < 1:
        raise InputError(f"supersample must be 1 or more sub-pixels per side; got {supersample}")
    _, transform = georef_of(like)
    if transform is None:
        raise InputError("the product has no grid transform (fewer than 2 pixels along x or y); zones need one")
    if not zones.names:
        raise InputError("no zones given; the zones file must hold at least one polygon")
    geoms = list(zones.geometries) + [shapely.union_all(list(zones.geometries))]
    ny, nx = int(like.sizes["y"]), int(like.sizes["x"])
    coords = {"zone": list(zones.names) + ["all_zones"], "y": like["y"].values, "x": like["x"].values}
    template = like if isinstance(like, xr.DataArray) else next(
        (v for v in like.data_vars.values() if "y" in v.dims and "x" in v.dims), None)
    chunks = template.chunks if template is not None else None
    if chunks is None:
        data = _weights_block(geoms, transform, 0, 0, ny, nx, mode, int(supersample))
        return xr.DataArray(data, dims=("zone", "y", "x"), coords=coords)
    import dask.array as da

    dims = list(template.dims)
    ychunks, xchunks = chunks[dims.index("y")], chunks[dims.index("x")]
    rows = np.r_[0, np.cumsum(ychunks)]
    cols = np.r_[0, np.cumsum(xchunks)]
    blocks = [[da.from_delayed(
        _delayed(_weights_block)(geoms, transform, int(rows[i]), int(cols[j]), int(h), int(w), mode, int(supersample)),
        shape=(len(geoms), int(h), int(w)), dtype=np.float32)
        for j, w in enumerate(xchunks)] for i, h in enumerate(ychunks)]
    data = da.concatenate([da.concatenate(row, axis=2) for row in blocks], axis=1)
    return xr.DataArray(data, dims=("zone", "y", "x"), coords=coords)


def zone_masks(zones: Zones, like: xr.DataArray | xr.Dataset) -> dict[str, np.ndarray]:
    """Each zone as a (y, x) boolean mask on ``like``'s grid: the pixels whose centre lies inside it
    (:func:`zone_weights` in ``centre`` mode), computed at once."""
    weights = zone_weights(zones, like, ZoneRaster.CENTRE).load()
    return {name: weights.sel(zone=name).values > 0.5 for name in zones.names}


def _delayed(func):
    from dask import delayed

    return delayed(func, pure=True)


def _tally_block(codes, weights, area, *, n_classes):
    """Block of a (y, x) class map -> (1, 1, 2, n_layers, n_classes + 1) pixels and areas.

    The layers are the zones, their union, outside the union and the whole block; without zones
    (``weights`` None) the whole block only.
    """
    ones = np.ones((1, *codes.shape))
    if weights is None:
        layers = ones
    else:
        layers = np.concatenate([weights, 1.0 - weights[-1:], ones])
    return zone_class_tally(codes, n_classes, layers, area[:, None])[None, None]


def zone_area_table(codes: xr.DataArray, class_names, weights: xr.DataArray | None, *,
                    excluded=(), row_area=None, area_note: str | None = None) -> xr.Dataset:
    """Pixels and area [ha] of each class in each zone, and its share of the zone's classified area.

    Parameters
    ----------
    codes : xarray.DataArray
        (y, x) integer class map, codes ``0 .. len(class_names) - 1``; other codes (a negative or
        255 no-data value) are tallied as ``no_data``.
    class_names : sequence of str
        Name of each code.
    weights : xarray.DataArray or None
        (zone, y, x) from :func:`zone_weights`, on the same grid; None: the whole map only.
    excluded : sequence of str
        Classes left out of the share's denominator as well as ``no_data`` (``insufficient_data``).
    row_area : (ny,) ndarray, optional
        Ground area of a pixel per row [m^2]; by default from ``codes``' grid.

    Returns
    -------
    xarray.Dataset
        On (zone, class): ``pixels`` (share-weighted), ``area_ha`` [ha] and ``share_pct`` [%] of
        the zone's area with a class not excluded; ``zone`` holds the zones, ``all_zones``,
        ``outside_zones`` and ``whole_map``; ``class`` the classes then ``no_data``. Lazy when the
        inputs are dask-backed (one small tally per chunk, then a sum).
    """
    names = [str(c) for c in class_names] + [NO_DATA]
    if row_area is None:
        row_area, area_note = pixel_area_rows(codes)
    row_area = np.asarray(row_area, dtype=np.float64)
    codes = codes.transpose("y", "x")
    w = weights.transpose("zone", "y", "x") if weights is not None else None
    n = len(names) - 1
    if codes.chunks is None and (w is None or w.chunks is None):
        total = _tally_block(np.asarray(codes.values), None if w is None else np.asarray(w.values), row_area,
                             n_classes=n)[0, 0]
    else:
        import dask.array as da

        c = codes.chunk() if codes.chunks is None else codes
        ad = da.from_array(row_area, chunks=(c.chunks[0],))
        if w is None:
            args, layers = (None, None), 1
        else:
            args = (w.chunk({"zone": -1, "y": c.chunks[0], "x": c.chunks[1]}).data, "zij")
            layers = w.sizes["zone"] + 2
        parts = da.blockwise(_tally_block, "ijsln", c.data, "ij", *args, ad, "i",
                             new_axes={"s": 2, "l": layers, "n": n + 1}, adjust_chunks={"i": 1, "j": 1},
                             concatenate=True, dtype=np.float64, n_classes=n)
        total = parts.sum(axis=(0, 1))
    zone = ["whole_map"] if w is None else list(w["zone"].values[:-1]) + list(RESERVED_ZONES)
    pixels = xr.DataArray(total[0], dims=("zone", "class"), coords={"zone": zone, "class": names})
    area = xr.DataArray(total[1] / 1e4, dims=("zone", "class"), coords={"zone": zone, "class": names})
    counted = [c not in excluded and c != NO_DATA for c in names]
    denominator = area.isel({"class": np.flatnonzero(counted)}).sum("class", skipna=False)
    share = (100.0 * area / denominator.where(denominator > 0)).where(xr.DataArray(counted, dims="class"))
    return xr.Dataset({
        "pixels": pixels.assign_attrs(long_name="pixels (weighted by the share inside the zone)", units="1"),
        "area_ha": area.assign_attrs(long_name="ground area", units="ha", comment=area_note or ""),
        "share_pct": share.assign_attrs(long_name="share of the zone's classified area", units="%"),
    })


def area_table_frame(table: xr.Dataset, **keys) -> pd.DataFrame:
    """A (zone, class) table of :func:`zone_area_table` as long rows, with ``keys`` as leading columns."""
    frame = table[["pixels", "area_ha", "share_pct"]].to_dataframe().reset_index()
    for i, (k, v) in enumerate(keys.items()):
        frame.insert(i, k, v)
    return frame
