"""Sentinel-2 Level-2A products as ESA delivers them: the SAFE folder with its JPEG 2000 band files.

A product is found by its name (``S2A_MSIL2A_20220315T103021_N0400_R108_T32TQM_20220315T140000.SAFE``) or,
for band files copied out of a SAFE or converted to GeoTIFF/COG, by the band file names
(``T32TQM_20220315T103021_B04_10m.jp2`` / ``.tif``) next to the product metadata ``MTD_MSIL2A.xml``. Each
band is taken at its native resolution (10 m: B2 B3 B4 B8; 20 m: B5 B6 B7 B8A B11 B12 and the scene
classification SCL; 60 m: B1 B9).

Reflectance = (DN + BOA_ADD_OFFSET) / BOA_QUANTIFICATION_VALUE, fill DN 0; the add-offset (-1000) exists
from processing baseline 04.00 on (25 January 2022) and is read per band from the metadata. ESA
Sentinel-2 Level-2A Product Specification (S2-PDGS-MPC-L2A-PSD) and the baseline 04.00 product notice
(from memory of the documents; the metadata values are used).
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np

from ...errors import StackReadError, UnknownNameError
from .landsat import _members, _read_bytes
from .scenes import Scene

__all__ = ["S2_PRODUCT", "parse_s2_name", "sentinel2_scenes", "read_s2_metadata"]

S2_PRODUCT = re.compile(
    r"(?P<sat>S2[A-D])_MSI(?P<level>L\d[AC])_(?P<start>\d{8}T\d{6})_N(?P<baseline>\d{4})_R(?P<orbit>\d{3})_"
    r"(?P<tile>T\d{2}[A-Z]{3})_(?P<stop>\d{8}T\d{6})"
)
_BAND_FILE = re.compile(r"(?P<tile>T\d{2}[A-Z]{3})_(?P<start>\d{8}T\d{6})_(?P<band>B\d[\dA]|SCL)_(?P<res>\d\d)m\."
                        r"(jp2|tif|tiff)$", re.IGNORECASE)
#: band_id of the metadata (0-12) -> band name
_BAND_IDS = ("B1", "B2", "B3", "B4", "B5", "B6", "B7", "B8", "B8A", "B9", "B10", "B11", "B12")
#: native resolution of each band [m]
NATIVE_RES = {"B1": 60, "B2": 10, "B3": 10, "B4": 10, "B5": 20, "B6": 20, "B7": 20, "B8": 10, "B8A": 20, "B9": 60,
              "B11": 20, "B12": 20, "SCL": 20}
_SENSORS = {"S2A": "sentinel-2a-msi", "S2B": "sentinel-2b-msi"}
QUANTIFICATION = 10000.0  # BOA_QUANTIFICATION_VALUE of every baseline so far (L2A PSD)


def parse_s2_name(text: str) -> dict | None:
    """Fields of a Sentinel-2 product name in ``text``, or None.

    Examples
    --------
    >>> f = parse_s2_name("S2A_MSIL2A_20220315T103021_N0400_R108_T32TQM_20220315T140000.SAFE")
    >>> f["sensor_id"], f["tile"], str(f["date"]), f["baseline"]
    ('sentinel-2a-msi', 'T32TQM', '2022-03-15', '04.00')
    """
    m = S2_PRODUCT.search(text)
    if m is None:
        return None
    return {"product_id": m.group(0), "satellite": m["sat"], "sensor_id": _SENSORS.get(m["sat"]), "level": m["level"],
            "date": _date(m["start"], text), "baseline": f"{m['baseline'][:2]}.{m['baseline'][2:]}",
            "tile": m["tile"], "start": m["start"]}


def _date(stamp: str, where: str) -> np.datetime64:
    try:
        return np.datetime64(f"{stamp[:4]}-{stamp[4:6]}-{stamp[6:8]}", "D")
    except ValueError:
        raise StackReadError(f"{where}: {stamp[:8]} is not a valid date; the file name may have been altered") from None


def read_s2_metadata(path: str, data: bytes) -> dict:
    """Processing baseline, spacecraft, quantification value and per-band add-offsets of MTD_MSIL2A.xml."""
    try:
        root = ET.fromstring(data)
    except ET.ParseError as exc:
        raise StackReadError(f"cannot read the Sentinel-2 metadata file {path}: {exc}; download the product again") from None
    out: dict = {"offsets": {}}
    for el in root.iter():
        tag = el.tag.rsplit("}", 1)[-1]
        text = (el.text or "").strip()
        if tag == "PROCESSING_BASELINE":
            out["baseline"] = text
        elif tag == "PRODUCT_TYPE":
            out["product_type"] = text
        elif tag == "SPACECRAFT_NAME":
            out["spacecraft"] = text
        elif tag in ("BOA_QUANTIFICATION_VALUE", "QUANTIFICATION_VALUE"):
            out["quantification"] = float(text)
        elif tag == "BOA_ADD_OFFSET":
            band_id = int(el.attrib.get("band_id", "-1"))
            if 0 <= band_id < len(_BAND_IDS):
                out["offsets"][_BAND_IDS[band_id]] = float(text)
    if "product_type" in out and "2A" not in out["product_type"]:
        raise StackReadError(f"{path} describes a {out['product_type']} product, not Level-2A surface reflectance")
    return out


def sentinel2_scenes(root: Path | None = None, *, members: list[tuple[str, str]] | None = None,
                     bands_wanted: dict[str, list[str]] | None = None) -> list[Scene]:
    """Every Sentinel-2 Level-2A product below ``root``: SAFE folders, or band files beside MTD_MSIL2A.xml.

    Raises
    ------
    StackReadError
        A product without metadata, a missing band or SCL band, a Level-1C product.
    UnknownNameError
        A satellite without measured responses in unmix.
    """
    groups: dict[tuple, dict] = {}
    metadata_by_dir: dict[str, str] = {}
    members = members if members is not None else _members(Path(root))
    for name, gpath in members:
        if name == "MTD_MSIL2A.xml" or name == "MTD_MSIL1C.xml":
            metadata_by_dir[str(Path(gpath).parent)] = gpath
    for name, gpath in members:
        m = _BAND_FILE.search(name)
        if m is None:
            continue
        band = m["band"].upper()
        band = "SCL" if band == "SCL" else f"B{int(band[1:])}" if band[1:].isdigit() else band
        product = _product_of(gpath)
        key = (m["tile"], m["start"], product["product_id"] if product else None)
        g = groups.setdefault(key, {"bands": {}, "res": {}, "product": product, "dirs": set()})
        res = int(m["res"])
        # the native resolution wins; a resampled copy (e.g. B2 at 20 m) is used only if it is all there is
        if band not in g["bands"] or res == NATIVE_RES.get(band) or (g["res"][band] != NATIVE_RES.get(band)
                                                                      and res < g["res"][band]):
            g["bands"][band] = gpath
            g["res"][band] = res
        g["dirs"].add(str(Path(gpath).parent))
    scenes = []
    for (tile, start, _), g in sorted(groups.items(), key=lambda kv: (kv[0][1], kv[0][0])):
        scenes.append(_scene(tile, start, g, metadata_by_dir, bands_wanted))
    return scenes


def _product_of(gpath: str) -> dict | None:
    for part in reversed(Path(gpath).parts):
        fields = parse_s2_name(part)
        if fields is not None:
            return fields
    return None


def _find_metadata(g: dict, metadata_by_dir: dict[str, str]) -> str | None:
    for d in sorted(g["dirs"]):
        p = Path(d)
        for up in (p, *p.parents):  # the SAFE root is 4 levels above IMG_DATA/R10m
            if str(up) in metadata_by_dir:
                return metadata_by_dir[str(up)]
    return None


def _scene(tile: str, start: str, g: dict, metadata_by_dir: dict[str, str],
           bands_wanted: dict[str, list[str]] | None) -> Scene:
    product = g["product"]
    pid = product["product_id"] if product else f"{tile}_{start}"
    if product is not None and product["level"] != "L2A":
        raise StackReadError(f"{pid} is a {product['level']} product, not Level-2A surface reflectance")
    mtd = _find_metadata(g, metadata_by_dir)
    if mtd is None:
        raise StackReadError(f"{pid}: the product metadata MTD_MSIL2A.xml is missing; it gives the quantification "
                             "value and the BOA add-offset of the bands: keep it with the band files")
    meta = read_s2_metadata(mtd, _read_bytes(mtd))
    spacecraft = meta.get("spacecraft", "")
    sat = product["satellite"] if product else ("S2" + spacecraft[-1] if spacecraft else "")
    sensor = _SENSORS.get(sat)
    if sensor is None:
        raise UnknownNameError(f"{pid}: {spacecraft or sat} has no measured spectral response in unmix; give its band "
                               "responses with --response FILE or leave these products out")
    wanted = (bands_wanted or {}).get(sensor)
    for band in wanted or []:
        if band not in g["bands"]:
            raise StackReadError(f"{pid}: the {band} band file ({tile}_{start}_{band[0]}{band[1:].zfill(2)}_"
                                 f"{NATIVE_RES.get(band, 20)}m) is missing; the product is incomplete")
    if "SCL" not in g["bands"]:
        raise StackReadError(f"{pid}: the scene classification band (SCL_20m) is missing; it masks cloud, shadow and "
                             "snow: keep it with the band files")
    names = wanted or [b for b in _BAND_IDS if b in g["bands"]]
    q = meta.get("quantification", QUANTIFICATION)
    baseline = meta.get("baseline") or (product["baseline"] if product else "")
    offsets = meta["offsets"]
    try:
        new_baseline = float(baseline) >= 4.0
    except ValueError:
        new_baseline = bool(offsets)
    if new_baseline and not offsets:
        raise StackReadError(f"{mtd}: processing baseline {baseline} products carry BOA_ADD_OFFSET values, but none "
                             "were found; the metadata file is incomplete")
    return Scene(
        product_id=pid, sensor=sensor, date=_date(start, pid), footprint=tile,
        bands={b: g["bands"][b] for b in names},
        scale={b: 1.0 / q for b in names},
        offset={b: offsets.get(b, 0.0) / q for b in names},
        nodata=0.0, quality=g["bands"]["SCL"], quality_kind="sentinel-2-scl", metadata=mtd,
        processing={"baseline": baseline, "level": "L2A"},
    )
