"""Landsat Collection 2 Level-2 scenes as the USGS delivers them: per-band GeoTIFFs, QA_PIXEL, MTL.

A scene is found by its product identifier in the file names (``LC08_L2SP_038037_20200815_20200919_02_T1``):
the band files ``<id>_SR_B<n>.TIF``, the pixel quality band ``<id>_QA_PIXEL.TIF`` and the metadata file
``<id>_MTL.txt`` (or ``.xml`` / ``.json``), in an extracted folder or inside the delivered tar file
(read in place through GDAL's ``/vsitar/``). The identifier gives sensor, path/row and date; the
metadata file must be there and be of Collection 2, and gives the surface-reflectance scale and offset
of each band.

Identifier layout and constants: USGS Landsat 8-9 Collection 2 Level 2 Science Product Guide
(LSDS-1619) and Landsat 4-7 Collection 2 Level 2 Science Product Guide (LSDS-1618): surface reflectance
= DN x 0.0000275 - 0.2, fill DN 0 (from memory of the guides; the MTL values are used when present).
"""

from __future__ import annotations

import json
import re
import tarfile
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np

from ...errors import StackReadError, UnknownNameError
from .scenes import Scene

__all__ = ["LANDSAT_ID", "parse_landsat_id", "landsat_scenes", "read_mtl"]

#: Product identifier: sensor+satellite, level, path/row, acquired, processed, collection, tier.
LANDSAT_ID = re.compile(
    r"(?P<sensor>L[CTEOM])(?P<sat>\d\d)_(?P<level>L\d[A-Z]{2})_(?P<path>\d{3})(?P<row>\d{3})_(?P<acq>\d{8})_"
    r"(?P<proc>\d{8})_(?P<coll>\d\d)_(?P<tier>T1|T2|RT)"
)
# Collection 2 Level-2 surface reflectance scaling (LSDS-1618 / LSDS-1619): used when the MTL lacks it
SR_SCALE = 2.75e-05
SR_OFFSET = -0.2
SR_FILL = 0.0

_SENSORS = {("LT", "04"): None, ("LT", "05"): "landsat-5-tm", ("LE", "07"): "landsat-7-etm",
            ("LC", "08"): "landsat-8-oli", ("LC", "09"): "landsat-9-oli", ("LO", "08"): "landsat-8-oli",
            ("LO", "09"): "landsat-9-oli"}
_BAND_FILE = re.compile(r"_SR_B(?P<band>\d{1,2})\.TIF{1,2}$", re.IGNORECASE)
_QA_FILE = re.compile(r"_QA_PIXEL\.TIF{1,2}$", re.IGNORECASE)
_MTL_FILE = re.compile(r"_MTL\.(txt|xml|json)$", re.IGNORECASE)


def parse_landsat_id(text: str) -> dict | None:
    """The fields of the Landsat product identifier in ``text`` (a file or folder name), or None.

    Examples
    --------
    >>> f = parse_landsat_id("LC08_L2SP_038037_20200815_20200919_02_T1_SR_B4.TIF")
    >>> f["sensor_id"], f["path_row"], str(f["date"]), f["collection"]
    ('landsat-8-oli', '038037', '2020-08-15', '02')
    """
    m = LANDSAT_ID.search(text)
    if m is None:
        return None
    acq = m["acq"]
    try:
        date = np.datetime64(f"{acq[:4]}-{acq[4:6]}-{acq[6:]}", "D")
    except ValueError:
        raise StackReadError(f"{text}: acquisition date {acq} in the Landsat product identifier is not a valid "
                             "date; the file name may have been altered") from None
    key = (m["sensor"] if m["sensor"] != "LO" else "LO", m["sat"])
    return {
        "product_id": m.group(0),
        "sensor_id": _SENSORS.get(key, "unknown"),
        "satellite": f"Landsat {int(m['sat'])}",
        "level": m["level"],
        "path_row": m["path"] + m["row"],
        "date": date,
        "collection": m["coll"],
        "tier": m["tier"],
    }


def read_mtl(path: str, data: bytes) -> dict[str, str]:
    """Keys and values of a Landsat MTL file (``.txt`` ODL, ``.xml`` or ``.json``), groups flattened."""
    name = path.lower()
    try:
        if name.endswith(".json"):
            flat: dict[str, str] = {}

            def walk(obj):
                for k, v in obj.items():
                    if isinstance(v, dict):
                        walk(v)
                    else:
                        flat[k] = str(v)

            walk(json.loads(data))
            return flat
        if name.endswith(".xml"):
            root = ET.fromstring(data)
            return {el.tag: (el.text or "").strip() for el in root.iter() if len(el) == 0}
        flat = {}
        for line in data.decode("utf-8", "replace").splitlines():
            if "=" not in line:
                continue
            key, _, value = line.partition("=")
            key = key.strip()
            if key in ("GROUP", "END_GROUP"):
                continue
            flat[key] = value.strip().strip('"')
        return flat
    except (ValueError, ET.ParseError) as exc:
        raise StackReadError(f"cannot read the Landsat metadata file {path}: {exc}; download the product again") from None


def _members(root: Path) -> list[tuple[str, str]]:
    """(file name, GDAL path) of every file below ``root`` (any depth), tar members included."""
    out = []
    paths = [root] if root.is_file() else sorted(p for p in root.rglob("*") if p.is_file())
    for p in paths:
        if p.suffix.lower() == ".tar" or p.name.lower().endswith((".tar.gz", ".tgz")):
            try:
                with tarfile.open(p) as tf:
                    names = [m.name for m in tf.getmembers() if m.isfile()]
            except (tarfile.TarError, OSError) as exc:
                raise StackReadError(f"cannot list the tar file {p}: {exc}; download it again") from None
            out += [(Path(n).name, f"/vsitar/{p}/{n}") for n in names]  # GDAL reads gzipped tar too
        else:
            out.append((p.name, str(p)))
    return out


def _read_bytes(gdal_path: str) -> bytes:
    if gdal_path.startswith("/vsitar/"):
        inner = gdal_path[len("/vsitar/"):]
        for marker in (".tar/", ".tar.gz/", ".tgz/"):
            if marker in inner:
                tar_path, member = inner.split(marker, 1)
                with tarfile.open(tar_path + marker[:-1]) as tf:
                    fh = tf.extractfile(member)
                    if fh is None:
                        break
                    return fh.read()
        raise StackReadError(f"cannot read {gdal_path} from its tar file")
    if gdal_path.startswith("/vsicurl/"):  # a metadata asset of a STAC item on a web server
        from urllib.request import urlopen

        url = gdal_path[len("/vsicurl/"):]
        try:
            with urlopen(url, timeout=60) as response:  # noqa: S310 - http(s) assets only (see stac.py)
                return response.read()
        except OSError as exc:
            raise StackReadError(f"cannot fetch {url}: {exc}") from None
    try:
        return Path(gdal_path).read_bytes()
    except OSError as exc:
        raise StackReadError(f"cannot read {gdal_path}: {exc}") from None


def landsat_scenes(root: Path | None = None, *, members: list[tuple[str, str]] | None = None,
                   bands_wanted: dict[str, list[str]] | None = None) -> list[Scene]:
    """Every Landsat Collection 2 Level-2 scene below ``root`` (folders, tar files, any depth).

    Parameters
    ----------
    root : path
        A folder (searched at any depth) or one tar file.
    members : list of (file name, GDAL path), optional
        The files to look at instead of ``root`` (e.g. the assets of STAC items).
    bands_wanted : dict of sensor id to list of band names, optional
        Bands each scene must have (a missing one is an error naming the product and band);
        default: every surface-reflectance band found.

    Raises
    ------
    StackReadError
        A scene without its metadata file, a metadata file of another collection or product, a
        missing band or quality band.
    UnknownNameError
        A sensor without measured responses (Landsat 4 TM, MSS).
    """
    groups: dict[str, dict] = {}
    for name, gpath in (members if members is not None else _members(Path(root))):
        fields = parse_landsat_id(name)
        if fields is None:
            if re.match(r"L[CTEOM]\d\d_", name) and (_BAND_FILE.search(name) or _QA_FILE.search(name)):
                raise StackReadError(f"{gpath}: the Landsat product identifier in this file name cannot be parsed "
                                     "(expected e.g. LC08_L2SP_038037_20200815_20200919_02_T1_SR_B4.TIF)")
            continue
        g = groups.setdefault(fields["product_id"], {"fields": fields, "bands": {}, "qa": None, "mtl": None})
        if (m := _BAND_FILE.search(name)) is not None:
            g["bands"][f"B{int(m['band'])}"] = gpath
        elif _QA_FILE.search(name):
            g["qa"] = gpath
        elif _MTL_FILE.search(name):
            # prefer the text MTL, then xml, then json, when several are delivered
            rank = {"txt": 0, "xml": 1, "json": 2}[_MTL_FILE.search(name).group(1).lower()]
            if g["mtl"] is None or rank < g["mtl"][0]:
                g["mtl"] = (rank, gpath)
    scenes = []
    for pid, g in sorted(groups.items()):
        if not g["bands"] and g["qa"] is None:
            continue  # only a metadata file or thermal bands: not a surface reflectance scene
        scenes.append(_scene(pid, g, bands_wanted))
    return scenes


def _scene(pid: str, g: dict, bands_wanted: dict[str, list[str]] | None) -> Scene:
    fields = g["fields"]
    sensor = fields["sensor_id"]
    if sensor is None or sensor == "unknown":
        raise UnknownNameError(f"{pid}: {fields['satellite']} ({pid[:4]}) has no measured spectral response in unmix; "
                               "give its band responses with --response FILE or leave these scenes out")
    if not fields["level"].startswith("L2"):
        raise StackReadError(f"{pid} is a {fields['level']} product, not Level-2 surface reflectance; order the "
                             "Collection 2 Level-2 product (L2SP or L2SR)")
    if fields["collection"] != "02":
        raise StackReadError(f"{pid} is of Collection {fields['collection']}; unmix reads Collection 2 Level-2 "
                             "products (scaling differs between collections)")
    if g["mtl"] is None:
        raise StackReadError(f"{pid}: the metadata file ({pid}_MTL.txt) is missing; it carries the scale and offset "
                             "of the bands: copy it beside the band files")
    mtl_path = g["mtl"][1]
    meta = read_mtl(mtl_path, _read_bytes(mtl_path))
    meta_id = meta.get("LANDSAT_PRODUCT_ID")
    if meta_id is not None and meta_id != pid:
        raise StackReadError(f"{mtl_path} describes {meta_id}, not {pid}; the metadata file belongs to another product")
    coll = meta.get("COLLECTION_NUMBER")
    if coll is not None and coll.strip().lstrip("0") != "2":
        raise StackReadError(f"{mtl_path} is of Collection {coll}, not Collection 2; use the Collection 2 metadata file")
    wanted = (bands_wanted or {}).get(sensor)
    for band in wanted or []:
        if band not in g["bands"]:
            raise StackReadError(f"{pid}: band file {pid}_SR_{band}.TIF is missing (needed for the {band} band of "
                                 f"{sensor}); the scene is incomplete")
    if g["qa"] is None:
        raise StackReadError(f"{pid}: the pixel quality band {pid}_QA_PIXEL.TIF is missing; it masks fill, cloud "
                             "and shadow: copy it beside the band files")
    bands = {b: g["bands"][b] for b in (wanted or sorted(g["bands"], key=lambda b: int(b[1:])))}
    scale, offset = {}, {}
    for b in bands:
        n = b[1:]
        scale[b] = _number(meta.get(f"REFLECTANCE_MULT_BAND_{n}"), SR_SCALE, mtl_path)
        offset[b] = _number(meta.get(f"REFLECTANCE_ADD_BAND_{n}"), SR_OFFSET, mtl_path)
    return Scene(
        product_id=pid, sensor=sensor, date=fields["date"], footprint=fields["path_row"], bands=bands, scale=scale,
        offset=offset, nodata=SR_FILL, quality=g["qa"], quality_kind="landsat-qa-pixel", metadata=mtl_path,
        processing={"level": fields["level"], "collection": fields["collection"], "tier": fields["tier"]},
    )


def _number(text: str | None, default: float, where: str) -> float:
    if text is None:
        return default
    try:
        return float(text)
    except ValueError:
        raise StackReadError(f"{where}: {text!r} is not a number; the metadata file is damaged") from None
