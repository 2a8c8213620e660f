"""Writing a reflectance cube as a folder of dated GeoTIFFs (one file per date, all bands).

The inverse of :func:`unmix.io.stack.open_stack` for GeoTIFF folders; used by the demo to lay out
its invented scene the way analysts receive real archives (int16 storage, GDAL scale, nodata).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Sequence

import numpy as np
import rasterio
from affine import Affine

from .products import atomic_path

__all__ = ["write_geotiff_stack"]


def write_geotiff_stack(
    reflectance: np.ndarray,
    dates: Sequence[np.datetime64],
    folder: str | os.PathLike,
    *,
    crs: str,
    transform: Sequence[float],
    band_names: Sequence[str],
    prefix: str = "scene",
    scale: float = 1e-4,
    nodata: int = -9999,
    overwrite: bool = False,
) -> list[Path]:
    """Write ``reflectance`` (time, band, y, x) as ``{prefix}_{YYYY-MM-DD}.tif`` files.

    Values are stored as int16 ``round(reflectance / scale)`` with the GDAL band scale set to
    ``scale``, so readers recover reflectance; NaN becomes ``nodata``. Files are tiled (256 x 256),
    deflate-compressed, and each band's description is its name.

    Parameters
    ----------
    reflectance : (n_time, n_bands, ny, nx) ndarray
        Reflectance 0..1; NaN = no data.
    dates : sequence of datetime64
        One date per time step.
    folder : path
        Created if missing.
    crs : str
        Any CRS text rasterio accepts (for example ``"EPSG:32734"``).
    transform : 6 floats
        Affine coefficients (a, b, c, d, e, f) of the upper-left pixel corner, as GDAL/rasterio order them.
    band_names : sequence of str
        Sensor band names, in band order.
    """
    refl = np.asarray(reflectance)
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    n_time, n_bands, ny, nx = refl.shape
    profile = {
        "driver": "GTiff", "width": nx, "height": ny, "count": n_bands, "dtype": "int16",
        "crs": crs, "transform": Affine(*transform[:6]), "nodata": nodata,
        "tiled": True, "blockxsize": 256, "blockysize": 256, "compress": "deflate",
    }
    info = np.iinfo(np.int16)
    paths = []
    for i in range(n_time):
        day = np.datetime_as_string(np.datetime64(dates[i], "D"))
        path = folder / f"{prefix}_{day}.tif"
        stored = np.round(refl[i] / scale)
        stored = np.where(np.isfinite(stored), np.clip(stored, info.min + 1, info.max), nodata)
        with atomic_path(path, overwrite=overwrite) as tmp:
            with rasterio.open(tmp, "w", **profile) as dst:
                dst.write(stored.astype(np.int16))
                dst.scales = [scale] * n_bands
                dst.offsets = [0.0] * n_bands
                dst.descriptions = tuple(band_names)
        paths.append(path)
    return paths
