"""Ground areas of pixels: projected grids from the transform, geographic grids on the ellipsoid,
checked against pyproj's geodesic polygon areas (Karney 2013), computed independently here."""

from __future__ import annotations

import numpy as np
import pyproj
import pytest
import xarray as xr

from unmix.cube.georef import pixel_area_m2, pixel_area_rows
from unmix.errors import InputError
from unmix.zones import ellipsoidal_row_areas, planar_pixel_area

WGS84 = dict(semi_major=6378137.0, inverse_flattening=298.257223563)


def _geod_cell(lon0, lon1, lat0, lat1, n=400):
    """Area [m^2] of a longitude/latitude cell by pyproj.Geod (Karney 2013): the parallels are densified so
    that the geodesic edges follow them."""
    lons = np.r_[np.linspace(lon0, lon1, n), np.linspace(lon1, lon0, n)]
    lats = np.r_[np.full(n, lat0), np.full(n, lat1)]
    area, _ = pyproj.Geod(ellps="WGS84").polygon_area_perimeter(lons, lats)
    return abs(area)


def test_one_degree_cell_at_the_equator():
    got = ellipsoidal_row_areas((1.0, 0.0, 0.0, 0.0, -1.0, 1.0), 1, **WGS84)[0]
    # pyproj.Geod (Karney 2013) with densified parallels: 12 308.46 km^2 for 0..1 E, 0..1 N on WGS84
    assert got == pytest.approx(_geod_cell(0, 1, 0, 1), rel=1e-7)
    assert got / 1e6 == pytest.approx(12308.46, abs=0.05)


@pytest.mark.parametrize("lat_top", [89.0, 60.0, 10.0, -45.0])
def test_rows_of_a_degree_grid_against_geodesic_areas(lat_top):
    step = 0.25
    rows = ellipsoidal_row_areas((step, 0.0, 20.0, 0.0, -step, lat_top), 4, **WGS84)
    for r in range(4):
        ref = _geod_cell(20.0, 20.0 + step, lat_top - step * (r + 1), lat_top - step * r)
        assert rows[r] == pytest.approx(ref, rel=1e-7)  # pyproj.Geod, independent of our closed form


def test_row_past_the_pole_has_no_area():
    rows = ellipsoidal_row_areas((1.0, 0.0, 0.0, 0.0, -1.0, 91.0), 2, **WGS84)
    assert np.isnan(rows[0]) and np.isfinite(rows[1])


def test_sphere_matches_spherical_zone_area():
    r = 6371000.0
    got = ellipsoidal_row_areas((1.0, 0.0, 0.0, 0.0, -1.0, 1.0), 1, semi_major=r, inverse_flattening=0.0)[0]
    # spherical zone (Archimedes): R^2 dlambda (sin phi2 - sin phi1)
    assert got == pytest.approx(r**2 * np.radians(1.0) * np.sin(np.radians(1.0)), rel=1e-12)


def test_rotated_geographic_grid_is_refused():
    with pytest.raises(InputError, match="rotated"):
        ellipsoidal_row_areas((1.0, 0.1, 0.0, 0.0, -1.0, 1.0), 1, **WGS84)


def test_planar_area_from_the_transform_and_unit():
    assert planar_pixel_area((30.0, 0.0, 0.0, 0.0, -30.0, 0.0)) == 900.0  # 30 m x 30 m
    assert planar_pixel_area((100.0, 0.0, 0.0, 0.0, -100.0, 0.0), 0.3048) == pytest.approx(929.0304)  # ft^2


def _grid(crs, x, y):
    return xr.Dataset({"v": (("y", "x"), np.zeros((y.size, x.size)))}, coords={
        "x": x, "y": y, "spatial_ref": ((), 0, {"crs_wkt": pyproj.CRS.from_user_input(crs).to_wkt()})})


def test_geographic_product_gets_areas_per_row():
    # 0.01 degree pixels, 50..49.95 N
    ds = _grid("EPSG:4326", 10.0 + 0.01 * (np.arange(4) + 0.5), 50.0 - 0.01 * (np.arange(5) + 0.5))
    rows, note = pixel_area_rows(ds)
    assert "geographic" in note
    for r in range(5):
        ref = _geod_cell(10.0, 10.01, 50.0 - 0.01 * (r + 1), 50.0 - 0.01 * r)
        assert rows[r] == pytest.approx(ref, rel=1e-6)  # pyproj.Geod (Karney 2013)
    assert np.isnan(pixel_area_m2(ds)[0])  # no single pixel area: it changes with latitude


def test_projected_product_in_feet():
    # EPSG:2263 (NAD83 / New York Long Island, US survey feet): 1 ft_US = 1200/3937 m (NIST)
    ds = _grid("EPSG:2263", 1000.0 + 10.0 * np.arange(3), 5000.0 - 10.0 * np.arange(3))
    area, _ = pixel_area_m2(ds)
    assert area == pytest.approx(100.0 * (1200 / 3937) ** 2, rel=1e-9)


def test_rule_areas_of_a_geographic_trend_product():
    import pandas as pd

    from unmix.cube.trends import trend_cube
    from unmix.trajectory import parse_rules

    rng = np.random.default_rng(1)
    time = pd.date_range("2015-01-01", periods=24, freq="QS")
    f = (0.5 + rng.normal(0, 0.01, (24, 1, 6, 5))).astype(np.float32)
    f[:, 0, :3] -= np.linspace(0, 0.3, 24)[:, None, None].astype(np.float32)  # rows 0-2 decline
    lat = 60.0 - 0.01 * (np.arange(6) + 0.5)
    ds = xr.Dataset({"fractions": (("time", "endmember", "y", "x"), f)}, coords={
        "time": time, "endmember": ["gv"], "y": lat, "x": 10.0 + 0.01 * (np.arange(5) + 0.5),
        "spatial_ref": ((), 0, {"crs_wkt": pyproj.CRS.from_epsg(4326).to_wkt()})})
    out = trend_cube(ds, rules=parse_rules("loss = gv:decrease"))
    mask = out["loss"].values == 1
    assert mask[:3].all() and not mask[3:].any()
    # reference: pyproj.Geod (Karney 2013) areas of the three rows of 5 cells
    ref = sum(5 * _geod_cell(10.0, 10.01, 60.0 - 0.01 * (r + 1), 60.0 - 0.01 * r) for r in range(3))
    assert float(out["rule_area"].sel(rule="loss")) == pytest.approx(ref / 1e4, rel=1e-6)
    assert "geographic" in out["rule_area"].attrs["comment"]
