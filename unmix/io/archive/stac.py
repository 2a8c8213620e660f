"""A local STAC catalog, collection, item or ItemCollection whose items point at delivered product files.

Each item's asset hrefs are resolved (relative hrefs against the item's own location; http(s) assets
are read through GDAL's ``/vsicurl/``) and handed, by file name, to the same readers as a folder
(:mod:`.landsat`, :mod:`.sentinel2`), so an archive organised by a catalog loads exactly as the files
themselves would. STAC specification: https://stacspec.org (read with ``pystac``).
"""

from __future__ import annotations

import json
from pathlib import Path
from urllib.parse import urlparse

from ...errors import StackReadError
from .landsat import landsat_scenes
from .scenes import Scene
from .sentinel2 import sentinel2_scenes

__all__ = ["is_stac", "stac_scenes"]


def is_stac(path: Path) -> bool:
    """True for a JSON file that is a STAC catalog, collection, item or FeatureCollection of items."""
    if not (path.is_file() and path.suffix.lower() in (".json", ".geojson")):
        return False
    try:
        data = json.loads(path.read_text())
    except (OSError, ValueError):
        return False
    return isinstance(data, dict) and (data.get("type") in ("Catalog", "Collection", "Feature", "FeatureCollection")
                                       or "stac_version" in data)


def _items(path: Path) -> list:
    import pystac

    data = json.loads(path.read_text())
    try:
        if data.get("type") == "FeatureCollection":
            return list(pystac.ItemCollection.from_file(str(path)))
        if data.get("type") == "Feature":
            return [pystac.Item.from_file(str(path))]
        root = pystac.read_file(str(path))
        return list(root.get_items(recursive=True))
    except (pystac.STACError, KeyError, ValueError, OSError) as exc:
        raise StackReadError(f"cannot read the STAC file {path}: {exc}") from None


def _gdal_path(href: str) -> str:
    scheme = urlparse(href).scheme
    if scheme in ("http", "https"):
        return f"/vsicurl/{href}"
    if scheme == "file":
        return urlparse(href).path
    return href


def stac_scenes(path: Path, *, bands_wanted: dict[str, list[str]] | None = None) -> list[Scene]:
    """The scenes of every item of a STAC file; an item without the needed assets is an error naming it."""
    scenes: list[Scene] = []
    for item in _items(Path(path)):
        members = []
        for asset in item.assets.values():
            href = asset.get_absolute_href() or asset.href
            members.append((Path(urlparse(href).path).name, _gdal_path(href)))
        try:
            found = landsat_scenes(members=members, bands_wanted=bands_wanted) + \
                sentinel2_scenes(members=members, bands_wanted=bands_wanted)
        except StackReadError as exc:
            raise StackReadError(f"STAC item {item.id} ({path}): {exc}") from None
        if not found:
            raise StackReadError(f"STAC item {item.id} ({path}) has no Landsat Collection 2 Level-2 or Sentinel-2 "
                                 "Level-2A band assets (hrefs named as delivered, e.g. ..._SR_B4.TIF or "
                                 "..._B04_10m.jp2); add the band, quality and metadata assets")
        scenes += found
    return scenes
