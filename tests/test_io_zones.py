"""Reading zone files: GeoJSON / GeoPackage / Shapefile, reprojection, repairs, and every bad input as one
clear error."""

from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pyproj
import pytest
import shapely

from unmix.errors import UnknownNameError, ZoneFileError
from unmix.io.zones import file_sha256, read_zones

UTM33 = pyproj.CRS.from_epsg(32633).to_wkt()


def _geojson(path, features, crs=None):
    doc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": props, "geometry": geom} for props, geom in features]}
    if crs:
        doc["crs"] = {"type": "name", "properties": {"name": crs}}
    path.write_text(json.dumps(doc), encoding="utf-8")
    return path


def _square(x, y, d=0.01):
    return {"type": "Polygon", "coordinates": [[[x, y], [x + d, y], [x + d, y + d], [x, y + d], [x, y]]]}


def test_geojson_without_crs_is_wgs84_and_is_reprojected(tmp_path):
    p = _geojson(tmp_path / "z.geojson", [({"name": "a"}, _square(15.0, 37.0))])
    z = read_zones(p, name_field="name", crs=UTM33)
    # RFC 7946: GeoJSON coordinates are WGS 84 longitude / latitude; pyproj gives the UTM reference
    x, y = pyproj.Transformer.from_crs(4326, 32633, always_xy=True).transform(15.0, 37.0)
    minx, miny, _, _ = z.geometries[0].bounds
    assert minx == pytest.approx(x, abs=1.0) and miny == pytest.approx(y, abs=1.0)
    assert z.names == ("a",) and z.sha256 == file_sha256(p) and len(z.sha256) == 64


def test_features_with_one_name_are_merged(tmp_path):
    p = _geojson(tmp_path / "z.geojson", [({"district": "north"}, _square(0, 0)), ({"district": "south"}, _square(0, 1)),
                                          ({"district": "north"}, _square(1, 0))])
    z = read_zones(p, name_field="district")
    assert z.names == ("north", "south")
    assert z.geometries[0].area == pytest.approx(2e-4)  # two squares of 0.01 x 0.01 degree


def test_shapefile_and_geopackage(tmp_path):
    geoms = [shapely.box(500000, 4099000, 501000, 4100000)]
    gdf = gpd.GeoDataFrame({"zone": ["farm"]}, geometry=geoms, crs="EPSG:32633")
    gdf.to_file(tmp_path / "z.shp")
    gdf.to_file(tmp_path / "z.gpkg")
    for name in ("z.shp", "z.gpkg"):
        z = read_zones(tmp_path / name, name_field="zone", crs=UTM33)
        assert z.geometries[0].area == pytest.approx(1e6)
    (tmp_path / "z.prj").unlink()
    with pytest.raises(ZoneFileError, match="coordinate reference system"):
        read_zones(tmp_path / "z.shp", name_field="zone")


def test_invalid_polygon_is_repaired(tmp_path):
    bowtie = {"type": "Polygon", "coordinates": [[[0, 0], [1, 1], [1, 0], [0, 1], [0, 0]]]}
    z = read_zones(_geojson(tmp_path / "z.geojson", [({"name": "b"}, bowtie)]), name_field="name")
    assert z.repaired == 1
    assert z.geometries[0].is_valid and z.geometries[0].area == pytest.approx(0.5)  # two triangles of 0.25


@pytest.mark.parametrize("case,error,match", [
    ("missing", ZoneFileError, "does not exist"),
    ("field", UnknownNameError, "available: name"),
    ("empty", ZoneFileError, "no feature"),
    ("point", ZoneFileError, "Point, not a polygon"),
    ("noname", ZoneFileError, "feature 1 has no 'name'"),
    ("reserved", ZoneFileError, "kept for the tables"),
    ("garbage", ZoneFileError, "cannot read zones file"),
])
def test_bad_zone_files(tmp_path, case, error, match):
    p = tmp_path / "z.geojson"
    if case == "field":
        _geojson(p, [({"name": "a"}, _square(0, 0))])
    elif case == "empty":
        _geojson(p, [])
    elif case == "point":
        _geojson(p, [({"name": "a"}, {"type": "Point", "coordinates": [0, 0]})])
    elif case == "noname":
        _geojson(p, [({"name": None}, _square(0, 0))])
    elif case == "reserved":
        _geojson(p, [({"name": "all_zones"}, _square(0, 0))])
    elif case == "garbage":
        p.write_bytes(b"\x00\x01 not a vector file")
    field = "label" if case == "field" else "name"
    with pytest.raises(error, match=match) as info:
        read_zones(p, name_field=field)
    assert "\n" not in str(info.value)
    assert np.isscalar(str(info.value))
