"""An archive of delivered Level-2 products as one lazy (time, band, y, x) reflectance cube.

:func:`find_scenes` lists the Landsat Collection 2 and Sentinel-2 Level-2A scenes below a folder (any
depth, tar files included); :func:`open_archive` stacks them by band role (blue, green, red, nir, swir1,
swir2 by default) on one target grid, one date per acquisition day (scenes of the same day mosaicked),
with the sensor of every date as a ``sensor`` coordinate on ``time``. Nothing is read until computed:
each (date, window) is one task (:class:`.read.DateReader`), so memory is bounded by the chunk.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import xarray as xr

from ...errors import InputError, StackReadError
from ...sensors.roles import DEFAULT_ROLES, bands_for_roles
from ..products.grid_mapping import grid_mapping_attrs, xy_attrs
from ..stack.chunks import _dask_from_readers, _spatial_chunks
from ..stack.geotiff import gdal_message
from .grid import TargetGrid
from .landsat import landsat_scenes
from .quality import check_mask, default_mask
from .read import DateReader, SourceFile, source_file
from .scenes import Scene
from .sentinel2 import sentinel2_scenes
from .stac import is_stac, stac_scenes

__all__ = ["find_scenes", "open_archive"]

#: Target chunk edge [pixels].
_CHUNK = 1024


def find_scenes(root: str | os.PathLike, *, roles: Sequence[str] = DEFAULT_ROLES) -> list[Scene]:
    """Every Landsat Collection 2 Level-2 and Sentinel-2 Level-2A scene below ``root``, sorted by date.

    ``root`` is a folder (any depth, tar files included), one tar file, or a STAC JSON file (catalog,
    collection, item or ItemCollection) whose items point at the delivered files.

    Each scene must have the bands of ``roles`` for its sensor (a missing one is an error naming the
    product and band). An empty list means ``root`` holds no such product.
    """
    root = Path(root)
    if not root.exists():
        raise StackReadError(f"{root} does not exist; give the folder of the downloaded products")
    wanted = {s: bands_for_roles(s, roles) for s in ("landsat-5-tm", "landsat-7-etm", "landsat-8-oli",
                                                     "landsat-9-oli", "sentinel-2a-msi", "sentinel-2b-msi")}
    if is_stac(root):
        scenes = stac_scenes(root, bands_wanted=wanted)
    else:
        scenes = landsat_scenes(root, bands_wanted=wanted) + sentinel2_scenes(root, bands_wanted=wanted)
    return sorted(scenes, key=lambda s: (s.date, s.product_id))


def open_archive(
    source: str | os.PathLike | Sequence[Scene],
    *,
    roles: Sequence[str] = DEFAULT_ROLES,
    grid: TargetGrid | None = None,
    masks: Mapping[str, Sequence[str]] | None = None,
    mask_share: float = 0.0,
    chunks: int | None = None,
) -> xr.DataArray:
    """Lazy (time, band, y, x) float32 reflectance of an archive of delivered products.

    Parameters
    ----------
    source : path or sequence of Scene
        A folder (or tar file) of products, or scenes from :func:`find_scenes`.
    roles : sequence of str, default blue, green, red, nir, swir1, swir2
        Band roles to stack (the ``band`` coordinate); each date reads its own sensor's bands.
    grid : TargetGrid, optional
        Target grid. Default: the grid of the first scene's coarsest needed band.
    masks : mapping, optional
        Quality names masked per quality kind (``"landsat-qa-pixel"``, ``"sentinel-2-scl"``); default
        :data:`.quality.LANDSAT_DEFAULT_MASK` and :data:`.quality.SCL_DEFAULT_MASK`.
    mask_share : float, default 0
        A target pixel is masked when masked quality pixels cover more than this share of it (0: any).
    chunks : int, optional
        Chunk edge [pixels]; default about 1024.

    Returns
    -------
    xarray.DataArray
        ``reflectance`` with coordinates ``time`` (one per day), ``band`` (the roles), ``y``, ``x``,
        ``sensor`` and ``product`` on ``time``, ``spatial_ref``; attributes ``crs_wkt``, ``transform``,
        ``input_files``.
    """
    scenes = list(find_scenes(source, roles=roles) if isinstance(source, (str, os.PathLike)) else source)
    if not scenes:
        raise StackReadError(f"no Landsat Collection 2 Level-2 or Sentinel-2 Level-2A product was found in {source}")
    if not 0.0 <= float(mask_share) < 1.0:
        raise InputError(f"mask share must be from 0 (any masked part) to below 1, got {mask_share}")
    masks = dict(masks or {})
    for kind in ("landsat-qa-pixel", "sentinel-2-scl"):
        masks[kind] = check_mask(kind, masks.get(kind, default_mask(kind)))
    files: dict[str, SourceFile] = {}
    for s in scenes:  # every header read once: checks, default grid and readers share the records
        files.update(check_scene_files(s, bands_for_roles(s.sensor, roles)))
    grid = grid or _default_grid(scenes[0], roles, files)

    by_day: dict[np.datetime64, list[Scene]] = {}
    for s in scenes:
        by_day.setdefault(s.date, []).append(s)
    readers, sensors, products = [], [], []
    for day, group in sorted(by_day.items()):
        kinds = {s.sensor for s in group}
        if len(kinds) > 1:  # two satellites the same day: keep the first sensor's scenes (one sensor per date)
            group = [s for s in group if s.sensor == group[0].sensor]
        readers.append(DateReader(
            date=str(day), scenes=tuple(group), bands=tuple(tuple(bands_for_roles(s.sensor, roles)) for s in group),
            grid=grid, masks=tuple(masks[s.quality_kind] for s in group), mask_share=float(mask_share),
            files=tuple((p, files[p]) for s in group for p in (*s.bands.values(), s.quality) if p)))
        sensors.append(group[0].sensor)
        products.append(" + ".join(s.product_id for s in group))

    ychunks, xchunks = _spatial_chunks(grid.height, grid.width, (1, 1), int(chunks or _CHUNK))
    data = _dask_from_readers(readers, len(roles), ychunks, xchunks)
    a, _, c, _, e, f = grid.transform
    x = c + a * (np.arange(grid.width) + 0.5)
    y = f + e * (np.arange(grid.height) + 0.5)
    x_attrs, y_attrs = xy_attrs(grid.crs_wkt)
    times = np.array(sorted(by_day), dtype="datetime64[D]").astype("datetime64[ns]")
    inputs = sorted({p for s in scenes for p in (*s.bands.values(), s.quality, s.metadata) if p})
    return xr.DataArray(
        data,
        dims=("time", "band", "y", "x"),
        coords={
            "time": ("time", times, {"standard_name": "time", "long_name": "acquisition date"}),
            "band": ("band", np.array(list(roles), dtype=str), {"long_name": "band role"}),
            "y": ("y", y, y_attrs),
            "x": ("x", x, x_attrs),
            "sensor": ("time", np.array(sensors, dtype=str), {"long_name": "sensor of the date"}),
            "product": ("time", np.array(products, dtype=str), {"long_name": "products mosaicked on the date"}),
            "spatial_ref": ((), np.int32(0), grid_mapping_attrs(grid.crs_wkt, grid.transform)),
        },
        name="reflectance",
        attrs={"long_name": "surface reflectance", "units": "1", "crs_wkt": grid.crs_wkt,
               "transform": tuple(grid.transform), "grid_mapping": "spatial_ref", "input_files": tuple(inputs),
               "masks": "; ".join(f"{k}: {', '.join(v)}" for k, v in masks.items()), "mask_share": float(mask_share)},
    )


def check_scene_files(scene: Scene, bands: Sequence[str]) -> dict[str, SourceFile]:
    """The headers of the scene's band files and quality band, checked: each opens, has a CRS, and covers
    the same ground (headers only). Returns path -> :class:`.read.SourceFile`.

    Raises StackReadError naming the product and the file (a file that does not open, e.g. a damaged
    JPEG 2000, or a quality band whose extent differs from the bands').
    """
    from rasterio.errors import RasterioIOError

    records: dict[str, SourceFile] = {}
    extent = None
    for name, path in [*((b, scene.bands[b]) for b in bands), ("quality", scene.quality)]:
        if path is None:
            continue
        try:
            record = records[path] = source_file(path)
        except RasterioIOError as exc:
            raise StackReadError(f"{scene.product_id}: cannot open {path} ({gdal_message(exc)}); "
                                 "the file is damaged or incomplete: download the product again") from None
        if record.crs_wkt is None:
            raise StackReadError(f"{scene.product_id}: {path} has no CRS; the product is damaged")
        bounds, shape, res = record.bounds, (record.height, record.width), record.resolution
        if extent is None:
            extent = (name, bounds, shape, res)
            continue
        ref_name, ref_bounds, ref_shape, ref_res = extent
        tol = max(res, ref_res) / 2
        if any(abs(a - b) > tol for a, b in zip(bounds, ref_bounds)):
            what = "quality band" if name == "quality" else f"band {name}"
            raise StackReadError(
                f"{scene.product_id}: the {what} ({path}, {shape[0]} x {shape[1]} pixels of {res:g}) does not cover "
                f"the same ground as band {ref_name} ({ref_shape[0]} x {ref_shape[1]} pixels of {ref_res:g}); the "
                "product is inconsistent: download it again")
    return records


def _default_grid(first: Scene, roles: Sequence[str], files: dict[str, SourceFile]) -> TargetGrid:
    """The grid of the first scene's coarsest band among the roles (30 m Landsat, 20 m Sentinel-2)."""
    coarsest = max((files[first.bands[b]] for b in bands_for_roles(first.sensor, roles)), key=lambda r: r.resolution)
    return TargetGrid(coarsest.crs_wkt, coarsest.transform, coarsest.width, coarsest.height)
