"""Writers of tiny delivered-product layouts for the archive tests (tmp_path only, nothing committed).

They follow the published layouts as far as the reader needs them: file names and identifiers, MTL
keys, QA_PIXEL bits, SCL classes, scale factors and offsets (USGS LSDS-1618/1619, ESA L2A PSD; from
memory of the documents). Reflectance values are invented.
"""

from __future__ import annotations

import tarfile
from pathlib import Path

import numpy as np
import rasterio
from affine import Affine

CRS = "EPSG:32612"
ORIGIN = (500000.0, 3600000.0)  # left, top [m]
OLI_BANDS = ("B2", "B3", "B4", "B5", "B6", "B7")  # blue green red nir swir1 swir2 (USGS OLI band designations)
TM_BANDS = ("B1", "B2", "B3", "B4", "B5", "B7")
S2_BANDS = ("B2", "B3", "B4", "B8A", "B11", "B12")
S2_FILE = {"B2": "B02", "B3": "B03", "B4": "B04", "B8A": "B8A", "B11": "B11", "B12": "B12", "SCL": "SCL"}
S2_RES = {"B2": 10, "B3": 10, "B4": 10, "B8A": 20, "B11": 20, "B12": 20, "SCL": 20}
SR_SCALE, SR_OFFSET = 2.75e-05, -0.2  # Collection 2 Level-2 surface reflectance (LSDS-1619)
QA_CLEAR = 21824  # QA_PIXEL of a clear land pixel, OLI (bits 6, 8, 10, 12, 14; LSDS-1619)
QA_CLOUD = 22280  # cloud (bit 3) with high cloud confidence (LSDS-1619)


def _write(path: Path, data: np.ndarray, transform: Affine, dtype: str, nodata=None, driver="GTiff") -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    kwargs = {"tiled": True, "blockxsize": 32, "blockysize": 32, "compress": "deflate"} if driver == "GTiff" else {}
    if driver == "JP2OpenJPEG":
        kwargs = {"QUALITY": "100", "REVERSIBLE": "YES"}  # lossless JPEG 2000
    with rasterio.open(path, "w", driver=driver, width=data.shape[1], height=data.shape[0], count=1, dtype=dtype,
                       crs=CRS, transform=transform, nodata=nodata, **kwargs) as dst:
        dst.write(data.astype(dtype), 1)
    return path


def landsat_id(sensor: str = "LC08", path_row: str = "038037", date: str = "20200815", collection: str = "02") -> str:
    return f"{sensor}_L2SP_{path_row}_{date}_{date[:4]}0919_{collection}_T1"


def write_landsat_scene(root: Path, refl: np.ndarray, *, qa: np.ndarray | None = None, sensor: str = "LC08",
                        path_row: str = "038037", date: str = "20200815", collection: str = "02",
                        origin=ORIGIN, mtl: str = "txt", tar: bool = False, skip: tuple = ()) -> Path:
    """One scene: refl (6, y, x) in role order blue..swir2, qa (y, x) uint16; returns the folder or tar."""
    pid = landsat_id(sensor, path_row, date, collection)
    bands = TM_BANDS if sensor in ("LT05", "LE07", "LT04") else OLI_BANDS
    folder = root / pid
    transform = Affine(30.0, 0.0, origin[0], 0.0, -30.0, origin[1])
    dn = np.round(np.nan_to_num((refl - SR_OFFSET) / SR_SCALE)).astype(np.uint16)
    dn[~np.isfinite(refl)] = 0  # fill
    for k, band in enumerate(bands):
        if band not in skip:
            _write(folder / f"{pid}_SR_{band}.TIF", dn[k], transform, "uint16", nodata=0)
    if "QA" not in skip:
        q = np.full(refl.shape[1:], QA_CLEAR, np.uint16) if qa is None else qa
        _write(folder / f"{pid}_QA_PIXEL.TIF", q, transform, "uint16", nodata=1)
    if "MTL" not in skip:
        lines = ["GROUP = LANDSAT_METADATA_FILE", "  GROUP = PRODUCT_CONTENTS", f'    LANDSAT_PRODUCT_ID = "{pid}"',
                 '    PROCESSING_LEVEL = "L2SP"', f"    COLLECTION_NUMBER = {collection}",
                 "  END_GROUP = PRODUCT_CONTENTS", "  GROUP = LEVEL2_SURFACE_REFLECTANCE_PARAMETERS"]
        for n in range(1, 8):
            lines += [f"    REFLECTANCE_MULT_BAND_{n} = 2.75E-05", f"    REFLECTANCE_ADD_BAND_{n} = -0.200000"]
        lines += ["  END_GROUP = LEVEL2_SURFACE_REFLECTANCE_PARAMETERS", "END_GROUP = LANDSAT_METADATA_FILE", "END"]
        if mtl == "xml":
            xml = (f"<LANDSAT_METADATA_FILE><PRODUCT_CONTENTS><LANDSAT_PRODUCT_ID>{pid}</LANDSAT_PRODUCT_ID>"
                   f"<COLLECTION_NUMBER>{collection}</COLLECTION_NUMBER></PRODUCT_CONTENTS>"
                   "</LANDSAT_METADATA_FILE>")
            (folder / f"{pid}_MTL.xml").write_text(xml)
        else:
            (folder / f"{pid}_MTL.txt").write_text("\n".join(lines) + "\n")
    if not tar:
        return folder
    out = root / f"{pid}.tar"
    with tarfile.open(out, "w") as tf:
        for p in sorted(folder.iterdir()):
            tf.add(p, arcname=p.name)
    for p in folder.iterdir():
        p.unlink()
    folder.rmdir()
    return out


def s2_name(sat: str = "S2A", date: str = "20220315", tile: str = "T12STA", baseline: str = "0400") -> str:
    return f"{sat}_MSIL2A_{date}T180000_N{baseline}_R041_{tile}_{date}T200000"


def write_s2_product(root: Path, refl10: np.ndarray, *, scl20: np.ndarray | None = None, sat: str = "S2A",
                     date: str = "20220315", tile: str = "T12STA", baseline: str = "0400", offset: int = -1000,
                     driver: str = "JP2OpenJPEG", skip: tuple = ()) -> Path:
    """One SAFE product from 10 m reflectance refl10 (6, 3n, 3m) in role order; 20 m bands are 2x2 means."""
    name = s2_name(sat, date, tile, baseline)
    safe = root / f"{name}.SAFE"
    img = safe / "GRANULE" / f"L2A_{tile}_A000001_{date}T180000" / "IMG_DATA"
    ext = "jp2" if driver == "JP2OpenJPEG" else "tif"
    stamp = f"{date}T180000"
    for k, band in enumerate(S2_BANDS):
        if band in skip:
            continue
        res = S2_RES[band]
        data = refl10[k] if res == 10 else refl10[k].reshape(refl10.shape[1] // 2, 2, refl10.shape[2] // 2, 2).mean(
            axis=(1, 3))
        dn = np.round(data * 10000 - offset).astype(np.uint16)  # reflectance = (DN + offset) / 10000
        transform = Affine(float(res), 0.0, ORIGIN[0], 0.0, -float(res), ORIGIN[1])
        _write(img / f"R{res}m" / f"{tile}_{stamp}_{S2_FILE[band]}_{res}m.{ext}", dn, transform, "uint16", nodata=0,
               driver=driver)
    if "SCL" not in skip:
        shape20 = (refl10.shape[1] // 2, refl10.shape[2] // 2)
        scl = np.full(shape20, 4, np.uint8) if scl20 is None else scl20  # 4 = vegetation (L2A PSD)
        _write(img / "R20m" / f"{tile}_{stamp}_SCL_20m.{ext}", scl, Affine(20.0, 0, ORIGIN[0], 0, -20.0, ORIGIN[1]),
               "uint8", driver=driver)
    if "MTD" not in skip:
        offsets = "".join(f'<BOA_ADD_OFFSET band_id="{i}">{offset}</BOA_ADD_OFFSET>' for i in range(13))
        xml = ('<?xml version="1.0" encoding="UTF-8"?><n1:Level-2A_User_Product xmlns:n1="https://psd-14.sentinel2.eo.'
               'esa.int/PSD/User_Product_Level-2A.xsd"><n1:General_Info><Product_Info>'
               f"<PROCESSING_BASELINE>{baseline[:2]}.{baseline[2:]}</PROCESSING_BASELINE>"
               "<PRODUCT_TYPE>S2MSI2A</PRODUCT_TYPE>"
               f"<Datatake><SPACECRAFT_NAME>Sentinel-2{sat[-1]}</SPACECRAFT_NAME></Datatake></Product_Info>"
               "<Product_Image_Characteristics><QUANTIFICATION_VALUES_LIST>"
               '<BOA_QUANTIFICATION_VALUE unit="none">10000</BOA_QUANTIFICATION_VALUE></QUANTIFICATION_VALUES_LIST>'
               f"<BOA_ADD_OFFSET_VALUES_LIST>{offsets if int(baseline) >= 400 else ''}</BOA_ADD_OFFSET_VALUES_LIST>"
               "</Product_Image_Characteristics></n1:General_Info></n1:Level-2A_User_Product>")
        safe.mkdir(parents=True, exist_ok=True)
        (safe / "MTD_MSIL2A.xml").write_text(xml)
    return safe


def smooth_reflectance(shape: tuple, seed: int = 0, n_roles: int = 6) -> np.ndarray:
    """Invented reflectance (roles, y, x) in 0.02..0.6, smooth in space (values are not measurements)."""
    rng = np.random.default_rng(seed)
    base = np.array([0.05, 0.08, 0.10, 0.30, 0.25, 0.18])[:n_roles, None, None]
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]]
    wave = 0.03 * np.sin(yy / 7.0 + seed) * np.cos(xx / 5.0)
    return np.clip(base + wave + rng.normal(0, 0.005, (n_roles, *shape)), 0.02, 0.6)
