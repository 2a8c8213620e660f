"""Zones on a product grid: a rasterised disc's area, zones given in another CRS, per-zone tables that add
up, lazy tables equal to eager ones."""

from __future__ import annotations

import numpy as np
import pyproj
import pytest
import shapely
import xarray as xr

from unmix.cube.zones import Zones, area_table_frame, zone_area_table, zone_weights
from unmix.errors import InputError

UTM33 = pyproj.CRS.from_epsg(32633).to_wkt()


def _grid(ny=60, nx=60, x0=500000.0, y0=4100000.0, res=30.0, chunks=None):
    """A (y, x) map on a 30 m UTM 33N grid (pixel-centre coordinates)."""
    da = xr.DataArray(np.zeros((ny, nx), np.int16), dims=("y", "x"), coords={
        "y": y0 - res * (np.arange(ny) + 0.5), "x": x0 + res * (np.arange(nx) + 0.5),
        "spatial_ref": ((), 0, {"crs_wkt": UTM33})})
    return da.chunk(chunks) if chunks else da


def _disc():
    # a disc 1 km across centred on a pixel corner near the middle of the grid
    return shapely.Point(500000.0 + 900.0, 4100000.0 - 900.0).buffer(500.0, quad_segs=256)


@pytest.mark.parametrize("mode,tolerance_ha", [("centre", 0.9), ("share", 0.1)])
def test_disc_one_km_across_is_about_78_5_ha(mode, tolerance_ha):
    grid = _grid()
    w = zone_weights(Zones(("pivot",), (_disc(),)), grid, mode)
    table = zone_area_table(grid, ["bare"], w)
    area = float(table["area_ha"].sel(zone="pivot", **{"class": "bare"}))
    # common practice (../shared/CHECKS.md): a disc 1 km across covers pi * 0.5^2 km^2 = 78.54 ha, ~873 pixels of
    # 30 m; pixel centres miss or add up to about ten edge pixels (0.9 ha), 8x8 sub-pixel shares far fewer
    assert area == pytest.approx(np.pi * 500.0**2 / 1e4, abs=tolerance_ha)
    if mode == "centre":
        assert abs(float(w.sel(zone="pivot").sum()) - 873) <= 10
        # reference: pixel centres inside the circle counted by hand with numpy
        yy, xx = np.meshgrid(grid["y"].values, grid["x"].values, indexing="ij")
        inside = np.hypot(xx - 500900.0, yy - 4099100.0) < 500.0
        assert abs(float(w.sel(zone="pivot").sum()) - inside.sum()) <= 2  # polygon vs true circle at the edge


def test_zones_in_lon_lat_give_the_same_cells_as_in_utm(tmp_path):
    import geopandas as gpd

    from unmix.io.zones import read_zones

    grid = _grid()
    to_ll = pyproj.Transformer.from_crs(32633, 4326, always_xy=True)
    utm = [shapely.box(500300, 4098800, 501200, 4099700), _disc()]
    ll = [shapely.transform(shapely.segmentize(g, 10.0), lambda xy: np.column_stack(to_ll.transform(xy[:, 0], xy[:, 1])))
          for g in utm]
    folder = tmp_path
    gpd.GeoDataFrame({"name": ["field", "pivot"]}, geometry=ll, crs="EPSG:4326").to_file(folder / "z.gpkg")
    zones = read_zones(folder / "z.gpkg", name_field="name", crs=UTM33)
    w_ll = zone_weights(zones, grid).values
    w_utm = zone_weights(Zones(("field", "pivot"), tuple(utm)), grid).values
    # the reprojected polygons trace the same lines to within centimetres: at most a few edge pixels differ
    assert np.count_nonzero(w_ll != w_utm) <= 4
    assert w_utm[1].sum() > 800


def test_zone_tables_add_up_and_lazy_equals_eager():
    rng = np.random.default_rng(3)
    codes = _grid().copy(data=rng.integers(-1, 4, (60, 60)).astype(np.int16))
    zones = Zones(("west", "east"), (shapely.box(500000, 4098200, 500900, 4100000),
                                     shapely.box(500900, 4098200, 501800, 4099500)))
    for mode in ("centre", "share"):
        eager = zone_area_table(codes, ["a", "b", "c", "d"], zone_weights(zones, codes, mode))
        area = eager["area_ha"]
        # the zones do not overlap: west + east = all_zones; all_zones + outside = whole map
        np.testing.assert_allclose(area.sel(zone="west") + area.sel(zone="east"), area.sel(zone="all_zones"))
        np.testing.assert_allclose(area.sel(zone="all_zones") + area.sel(zone="outside_zones"),
                                   area.sel(zone="whole_map"))
        # whole map against numpy's own count of each code, 0.09 ha per 30 m pixel
        counts = np.bincount(np.where(codes.values < 0, 4, codes.values).ravel(), minlength=5)
        np.testing.assert_allclose(area.sel(zone="whole_map").values, counts * 0.09)
        lazy_codes = codes.chunk({"y": 17, "x": 25})
        lazy = zone_area_table(lazy_codes, ["a", "b", "c", "d"], zone_weights(zones, lazy_codes, mode))
        assert lazy["area_ha"].chunks is not None
        np.testing.assert_allclose(lazy["area_ha"].values, area.values)
        shares = eager["share_pct"].sel(zone="west").values[:4]
        assert shares.sum() == pytest.approx(100.0)
        whole = zone_area_table(lazy_codes, ["a", "b", "c", "d"], None)  # no zones: the whole map only
        assert list(whole["zone"].values) == ["whole_map"]
        np.testing.assert_allclose(whole["area_ha"].values[0], counts * 0.09)
    frame = area_table_frame(eager, endmember="gv")
    assert list(frame.columns[:3]) == ["endmember", "zone", "class"]
    assert len(frame) == 5 * 5


def test_overlapping_zones_count_shared_pixels_in_each():
    grid = _grid(ny=10, nx=10)
    a = shapely.box(500000, 4099700, 500150, 4100000)  # 5 x 10 pixels
    b = shapely.box(500090, 4099700, 500300, 4100000)  # 7 x 10 pixels, 2 columns shared with a
    t = zone_area_table(grid, ["bare"], zone_weights(Zones(("a", "b"), (a, b)), grid))["pixels"]
    assert float(t.sel(zone="a")[0]) == 50 and float(t.sel(zone="b")[0]) == 70
    assert float(t.sel(zone="all_zones")[0]) == 100  # the union counts each pixel once


def test_geographic_grid_table_uses_ellipsoidal_areas():
    # 0.001 degree pixels near 60 N: rows have different areas; pyproj.Geod gives the reference
    ny, nx = 8, 8
    grid = xr.DataArray(np.zeros((ny, nx), np.int16), dims=("y", "x"), coords={
        "y": 60.0 - 0.001 * (np.arange(ny) + 0.5), "x": 10.0 + 0.001 * (np.arange(nx) + 0.5),
        "spatial_ref": ((), 0, {"crs_wkt": pyproj.CRS.from_epsg(4326).to_wkt()})})
    z = Zones(("all",), (shapely.box(9.0, 59.0, 11.0, 61.0),))
    area = float(zone_area_table(grid, ["x"], zone_weights(z, grid))["area_ha"].sel(zone="all")[0])
    lons = np.r_[np.linspace(10.0, 10.008, 50), np.linspace(10.008, 10.0, 50)]
    lats = np.r_[np.full(50, 59.992), np.full(50, 60.0)]
    ref, _ = pyproj.Geod(ellps="WGS84").polygon_area_perimeter(lons, lats)  # Karney 2013
    assert area == pytest.approx(abs(ref) / 1e4, rel=1e-6)


def test_bad_inputs_are_one_line_errors():
    grid = _grid(ny=4, nx=4)
    with pytest.raises(InputError, match="no zones"):
        zone_weights(Zones((), ()), grid)
    with pytest.raises(InputError, match="supersample"):
        zone_weights(Zones(("a",), (shapely.box(0, 0, 1, 1),)), grid, "share", supersample=0)
    with pytest.raises(ValueError):
        zone_weights(Zones(("a",), (shapely.box(0, 0, 1, 1),)), grid, "nearest")
