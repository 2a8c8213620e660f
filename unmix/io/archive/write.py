"""Write a reflectance record in the Landsat Collection 2 Level-2 layout (for the invented demo scene).

One folder per date named by a product identifier, with the surface-reflectance band files
(``<id>_SR_B<n>.TIF``, uint16 DN = (reflectance + 0.2) / 0.0000275, fill 0), the pixel quality band
(``<id>_QA_PIXEL.TIF``: fill bit 0, cloud bit 3 and high cloud confidence where the scene has no data,
clear bit 6 elsewhere) and a metadata file (``<id>_MTL.txt`` with the product identifier, collection and
scaling). Layout and constants after the USGS Landsat Collection 2 Level-2 Science Product Guides
(LSDS-1618, LSDS-1619; from memory of the guides). The files are a demonstration of the layout, not
USGS products: every identifier and value the demo writes is invented.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from ...errors import OutputExistsError
from ...sensors.roles import DEFAULT_ROLES, bands_for_roles
from .landsat import SR_OFFSET, SR_SCALE

__all__ = ["write_landsat_l2"]

_PREFIX = {"landsat-5-tm": "LT05", "landsat-7-etm": "LE07", "landsat-8-oli": "LC08", "landsat-9-oli": "LC09"}
# QA_PIXEL values (LSDS-1618/1619): clear with low cloud, shadow, snow (and, for OLI, cirrus) confidence
_CLEAR = {"landsat-5-tm": 5440, "landsat-7-etm": 5440, "landsat-8-oli": 21824, "landsat-9-oli": 21824}
_CLOUD = 1 << 3 | 3 << 8  # cloud bit and high cloud confidence
_FILL = 1


def write_landsat_l2(reflectance: np.ndarray, dates: Sequence, sensors: Sequence[str], folder: str | os.PathLike, *,
                     crs: str, transform: tuple, path_row: str = "172078", roles: Sequence[str] = DEFAULT_ROLES,
                     overwrite: bool = False) -> list[Path]:
    """Write (time, role, y, x) reflectance as Landsat C2 L2 scene folders; NaN pixels become cloud.

    Returns the scene folders.
    """
    import rasterio
    from affine import Affine

    folder = Path(folder)
    refl = np.asarray(reflectance)
    out = []
    for t, (date, sensor) in enumerate(zip(dates, sensors)):
        day = str(np.datetime64(date, "D")).replace("-", "")
        pid = f"{_PREFIX[sensor]}_L2SP_{path_row}_{day}_{day}_02_T1"
        scene = folder / pid
        if scene.exists() and not overwrite:
            raise OutputExistsError(f"{scene} exists already; pass --overwrite to replace it")
        scene.mkdir(parents=True, exist_ok=True)
        missing = ~np.isfinite(refl[t]).all(axis=0)
        dn = np.clip(np.round((np.nan_to_num(refl[t]) - SR_OFFSET) / SR_SCALE), 1, 65455).astype(np.uint16)
        dn[:, missing] = 0
        profile = dict(driver="GTiff", width=refl.shape[3], height=refl.shape[2], count=1, crs=crs,
                       transform=Affine(*transform), tiled=True, blockxsize=256, blockysize=256, compress="deflate",
                       predictor=2)
        for k, band in enumerate(bands_for_roles(sensor, roles)):
            with rasterio.open(scene / f"{pid}_SR_{band}.TIF", "w", dtype="uint16", nodata=0, **profile) as dst:
                dst.write(dn[k], 1)
        qa = np.full(missing.shape, _CLEAR[sensor], np.uint16)
        qa[missing] = _CLOUD
        with rasterio.open(scene / f"{pid}_QA_PIXEL.TIF", "w", dtype="uint16", nodata=_FILL, **profile) as dst:
            dst.write(qa, 1)
        lines = ["GROUP = LANDSAT_METADATA_FILE", "  GROUP = PRODUCT_CONTENTS",
                 '    ORIGIN = "unmix demo: an invented scene written in the Collection 2 Level-2 layout"',
                 f'    LANDSAT_PRODUCT_ID = "{pid}"', '    PROCESSING_LEVEL = "L2SP"', "    COLLECTION_NUMBER = 02",
                 "  END_GROUP = PRODUCT_CONTENTS", "  GROUP = LEVEL2_SURFACE_REFLECTANCE_PARAMETERS"]
        for band in bands_for_roles(sensor, roles):
            lines += [f"    REFLECTANCE_MULT_BAND_{band[1:]} = {SR_SCALE:.2E}",
                      f"    REFLECTANCE_ADD_BAND_{band[1:]} = {SR_OFFSET:.6f}"]
        lines += ["  END_GROUP = LEVEL2_SURFACE_REFLECTANCE_PARAMETERS", "END_GROUP = LANDSAT_METADATA_FILE", "END"]
        (scene / f"{pid}_MTL.txt").write_text("\n".join(lines) + "\n")
        out.append(scene)
    return out
