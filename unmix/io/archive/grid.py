"""The target grid every date of an archive is warped onto: CRS, transform and shape."""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ...errors import GridMismatchError, InputError, StackReadError

__all__ = ["TargetGrid", "grid_from_raster", "grid_from_bounds"]


@dataclass(frozen=True)
class TargetGrid:
    """A north-up pixel grid: ``crs_wkt``, ``transform`` (6 GDAL-order affine terms a, b, c, d, e, f), shape."""

    crs_wkt: str
    transform: tuple
    width: int
    height: int

    @property
    def resolution(self) -> tuple[float, float]:
        a, b, _, d, e, _ = self.transform
        return math.hypot(a, d), math.hypot(b, e)

    def window_transform(self, row0: int, col0: int) -> tuple:
        a, b, c, d, e, f = self.transform
        return (a, b, c + a * col0 + b * row0, d, e, f + d * col0 + e * row0)


def grid_from_raster(path: str | Path) -> TargetGrid:
    """The grid of a raster file (``--grid FILE``)."""
    import rasterio
    from rasterio.errors import RasterioIOError

    try:
        with rasterio.open(path) as src:
            if src.crs is None:
                raise GridMismatchError(f"the grid file {path} has no CRS; give a georeferenced raster")
            return TargetGrid(src.crs.to_wkt(), tuple(src.transform)[:6], src.width, src.height)
    except RasterioIOError as exc:
        raise StackReadError(f"cannot open the grid file {path}: {exc}") from None


def grid_from_bounds(crs: Any, resolution: float, bounds: tuple[float, float, float, float]) -> TargetGrid:
    """A grid from ``--crs``, ``--resolution`` [CRS units] and ``--bounds`` (left, bottom, right, top).

    The grid's origin is the top left corner (left, top); the right and bottom edges are moved
    outwards to whole pixels.

    Raises
    ------
    InputError
        Resolution not positive, bounds empty, or a resolution in metres for a geographic CRS.
    """
    from rasterio.crs import CRS
    from rasterio.errors import CRSError

    try:
        crs = CRS.from_user_input(crs)
    except CRSError as exc:
        raise InputError(f"--crs {crs!r} is not a CRS GDAL knows ({exc}); use e.g. EPSG:32633") from None
    res = float(resolution)
    if not res > 0:
        raise InputError(f"--resolution must be positive, got {resolution}")
    if crs.is_geographic and res >= 1.0:
        raise InputError(f"--resolution {res:g} is in the units of {crs.to_string()}, which are degrees: {res:g} "
                         "degrees is not a pixel size; give a projected CRS (e.g. the UTM zone, EPSG:326xx) for a "
                         "resolution in metres, or the resolution in degrees (30 m is about 0.00027 degrees)")
    left, bottom, right, top = (float(v) for v in bounds)
    if not (right > left and top > bottom):
        raise InputError(f"--bounds must be left,bottom,right,top with right > left and top > bottom, got {bounds}")
    # the grid starts at the top left corner given; right and bottom edges grow to whole pixels
    width, height = math.ceil((right - left) / res - 1e-9), math.ceil((top - bottom) / res - 1e-9)
    if width * height > 2**31:
        raise InputError(f"--bounds and --resolution make a grid of {width} x {height} pixels; that is too large")
    return TargetGrid(crs.to_wkt(), (res, 0.0, left, 0.0, -res, top), width, height)
