"""Read zone polygons (GeoJSON, GeoPackage, Shapefile, any vector file GDAL reads through pyogrio).

Rules applied while reading, so every later step sees clean polygons in the raster's CRS:

- the zone name comes from the attribute the user picks (``name_field``); an unknown field is an
  error that lists the fields the file has; a feature without a name is an error;
- features that share a name are merged into one zone (a district of several parts, say);
- the file must say its CRS: GeoJSON without one is longitude / latitude on WGS 84 (RFC 7946, which
  GDAL applies), a Shapefile without its ``.prj`` is an error;
- geometries are reprojected to the raster's CRS when the two differ;
- invalid polygons (self-intersections...) are repaired with ``shapely.make_valid`` and their polygon
  parts kept (the count is reported); points, lines and empty geometries are an error.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

import numpy as np

from ..cube.zones import RESERVED_ZONES, Zones
from ..errors import UnknownNameError, ZoneFileError

__all__ = ["read_zones", "file_sha256", "write_area_csvs", "write_zones_file"]


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 hex digest of a file's bytes (for provenance)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _polygonal(geom):
    """The polygon parts of a geometry (after repair), as one (Multi)Polygon, or None."""
    import shapely

    parts = [g for g in shapely.get_parts(geom) if g.geom_type in ("Polygon", "MultiPolygon") and not g.is_empty]
    if not parts:
        return None
    return shapely.union_all(parts)


def read_zones(path: str | os.PathLike, *, name_field: str, crs=None) -> Zones:
    """Read zone polygons and their names, reprojected to ``crs``.

    Parameters
    ----------
    path : str or Path
        A GeoJSON, GeoPackage or Shapefile (``.shp`` with its ``.dbf``, ``.shx`` and ``.prj``).
    name_field : str
        Attribute holding each zone's name.
    crs : str, pyproj.CRS or None
        CRS of the raster (WKT, ``EPSG:xxxx``); the zones are reprojected to it when they differ.
        None keeps the file's CRS.

    Returns
    -------
    Zones
        Names (sorted as in the file, duplicates merged), polygons in ``crs``, the CRS as WKT, the
        file name and SHA-256, and how many geometries were repaired.

    Raises
    ------
    ZoneFileError
        The file is missing or unreadable, holds no feature, has no CRS, or a geometry is not a
        polygon / is empty / has no name (the feature is named).
    UnknownNameError
        ``name_field`` is not an attribute of the file (the available ones are listed).

    Examples
    --------
    >>> import json, tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "z.geojson")
    >>> ring = [[0, 0], [0.01, 0], [0.01, 0.01], [0, 0.01], [0, 0]]
    >>> feature = {"type": "Feature", "properties": {"name": "a"},
    ...            "geometry": {"type": "Polygon", "coordinates": [ring]}}
    >>> _ = open(p, "w").write(json.dumps({"type": "FeatureCollection", "features": [feature]}))
    >>> read_zones(p, name_field="name").names
    ('a',)
    """
    import geopandas as gpd
    import pyproj
    import shapely

    path = Path(path)
    if not path.exists():
        raise ZoneFileError(f"zones file {path} does not exist; check the path given to --zones")
    try:
        gdf = gpd.read_file(path, engine="pyogrio")
    except Exception as exc:  # pyogrio / GDAL raise their own types
        raise ZoneFileError(
            f"cannot read zones file {path}: {str(exc).splitlines()[0] if str(exc) else type(exc).__name__}; "
            "give a GeoJSON, GeoPackage or Shapefile of polygons"
        ) from None
    if len(gdf) == 0:
        raise ZoneFileError(f"zones file {path} holds no feature; draw the zones' polygons in it")
    fields = [c for c in gdf.columns if c != gdf.geometry.name]
    if name_field not in fields:
        raise UnknownNameError(
            f"zones file {path} has no attribute {name_field!r} for the zone names; available: "
            f"{', '.join(fields) if fields else '(none: add a name attribute to the features)'}"
        )
    if gdf.crs is None:
        raise ZoneFileError(
            f"zones file {path} does not say its coordinate reference system (a Shapefile needs its .prj "
            "file); save the zones with their CRS"
        )
    names = gdf[name_field]
    for i, (name, geom) in enumerate(zip(names, gdf.geometry)):
        where = f"zones file {path}, feature {i + 1}"
        if name is None or (isinstance(name, float) and np.isnan(name)) or str(name).strip() == "":
            raise ZoneFileError(f"{where} has no {name_field!r}; give every zone a name")
        if str(name) in RESERVED_ZONES:
            raise ZoneFileError(f"{where}: the zone name {name!r} is kept for the tables' totals; rename the zone")
        if geom is None or geom.is_empty:
            raise ZoneFileError(f"{where} ({name}) has an empty geometry; remove it or draw its polygon")
        if geom.geom_type not in ("Polygon", "MultiPolygon", "GeometryCollection"):
            raise ZoneFileError(
                f"{where} ({name}) is a {geom.geom_type}, not a polygon; zones must be areas (Polygon or "
                "MultiPolygon)"
            )
    geoms = np.asarray(gdf.geometry.values)
    invalid = ~shapely.is_valid(geoms)
    repaired = int(invalid.sum())
    if repaired:
        geoms = geoms.copy()
        geoms[invalid] = shapely.make_valid(geoms[invalid])
    geoms = [_polygonal(g) for g in geoms]
    for i, g in enumerate(geoms):
        if g is None:
            raise ZoneFileError(f"zones file {path}, feature {i + 1} ({names.iloc[i]}) holds no polygon")
    source_crs = pyproj.CRS.from_user_input(gdf.crs)
    target = pyproj.CRS.from_user_input(crs) if crs is not None else source_crs
    if not source_crs.equals(target, ignore_axis_order=True):
        geoms = list(gpd.GeoSeries(geoms, crs=source_crs).to_crs(target).values)
    merged: dict[str, list] = {}
    for name, g in zip((str(n) for n in names), geoms):
        merged.setdefault(name, []).append(g)
    polygons = tuple(shapely.union_all(parts) if len(parts) > 1 else parts[0] for parts in merged.values())
    return Zones(names=tuple(merged), geometries=polygons, crs_wkt=target.to_wkt(), source=str(path),
                 sha256=file_sha256(path), repaired=repaired)


def write_area_csvs(tables, products) -> list[Path]:
    """Write area tables (``{path: pandas.DataFrame}``) as CSV into a claimed :class:`ProductSet`.

    Hectares and percentages with 4 decimals; each file appears when the set is committed.
    """
    written = []
    for path, frame in tables.items():
        with products.writing(path) as tmp:
            frame.to_csv(tmp, index=False, float_format="%.4f")
        written.append(Path(path))
    return written


def write_zones_file(path: str | os.PathLike, names, geometries, *, crs, name_field: str = "name",
                     overwrite: bool = False) -> Path:
    """Write zone polygons with their names as GeoJSON (any CRS pyproj knows), atomically.

    Parameters
    ----------
    path : path
        Destination ``.geojson``.
    names : sequence of str
    geometries : sequence of shapely polygons
        In ``crs``.
    crs : str or pyproj.CRS
        CRS of the geometries, written with the file (e.g. ``EPSG:4326``).
    name_field : str
        Attribute the names go to.
    overwrite : bool
        Replace an existing file.
    """
    import geopandas

    from .products.atomic import atomic_path

    frame = geopandas.GeoDataFrame({name_field: [str(n) for n in names]}, geometry=list(geometries), crs=crs)
    with atomic_path(path, overwrite=overwrite) as tmp:
        frame.to_file(tmp, driver="GeoJSON")
    return Path(path)
