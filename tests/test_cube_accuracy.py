"""Tests of unmix.cube.accuracy: class maps of a product as strata, sample points, fractions at points.

Outside references: numpy counts of the map's codes, xarray's own label-based selection (``sel`` with
``method="nearest"``) for the pixel holding a point, and rasterio's CRS for a geographic grid.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from unmix.cube.accuracy import fractions_at_points, sample_points, select_class_map, strata_table
from unmix.errors import InputError, UnknownNameError


def _rule_map(crs_wkt=None, step=30.0):
    codes = np.zeros((10, 12), np.uint8)
    codes[:4, :5] = 1
    codes[9, :] = 255
    ds = xr.Dataset(
        {"loss": (("y", "x"), codes, {"flag_values": np.array([0, 1, 255], np.uint8),
                                      "flag_meanings": "false true insufficient_data"}),
         "slope": (("y", "x"), np.zeros((10, 12)))},
        coords={"y": 100.0 - step * (np.arange(10) + 0.5), "x": step * (np.arange(12) + 0.5)},
    )
    if crs_wkt:  # as open_product leaves it: the CRS on each gridded variable
        ds["loss"].attrs["crs_wkt"] = crs_wkt
    return ds


def test_strata_leave_out_no_data_and_count_pixels():
    ds = _rule_map()
    da = select_class_map(ds, "loss")
    table = strata_table(da)
    assert table["map_class"].tolist() == ["false", "true"]
    assert table["mapped_pixels"].tolist() == [int((ds["loss"].values == 0).sum()), 20]  # numpy count
    np.testing.assert_allclose(table["mapped_area_ha"], table["mapped_pixels"] * 0.09)
    # a geographic grid has no pixel area in m^2: areas stay in pixels (NaN ha)
    geo = strata_table(select_class_map(_rule_map('GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433],AUTHORITY["EPSG","4326"]]', step=0.001), "loss"))
    assert np.isnan(geo["pixel_area_m2"]).all() and "geographic" in geo.attrs["area_note"]


def test_only_flagged_maps_are_class_maps():
    ds = _rule_map()
    with pytest.raises(UnknownNameError, match="loss"):
        select_class_map(ds, "slope")
    with pytest.raises(InputError, match="--endmember"):
        select_class_map(ds, "loss", "soil")


def test_points_sit_at_pixel_centres_of_their_class():
    da = select_class_map(_rule_map(), "loss")
    strata = strata_table(da)
    pts = sample_points(da, strata, [5, 7], seed=2)
    assert sorted(pts["point_id"]) == list(range(1, 13))
    picked = da.sel(x=xr.DataArray(pts["x"].to_numpy()), y=xr.DataArray(pts["y"].to_numpy())).values
    np.testing.assert_array_equal(picked, pts["map_code"])
    assert pts.groupby("map_class").size().to_dict() == {"false": 5, "true": 7}


def test_fractions_at_points_take_the_pixel_and_nearest_date():
    rng = np.random.default_rng(0)
    time = pd.to_datetime(["2020-01-01", "2020-02-01"])
    da = xr.DataArray(rng.uniform(size=(2, 2, 10, 12)), dims=("time", "endmember", "y", "x"),
                      coords={"time": time, "endmember": ["a", "b"], "y": 100.0 - 30 * (np.arange(10) + 0.5),
                              "x": 30 * (np.arange(12) + 0.5)})
    x = rng.uniform(0, 360, 20)
    y = rng.uniform(-200, 100, 20)
    dates = np.array(["2020-01-05", "2020-01-30"] * 10, dtype="datetime64[D]")
    got = fractions_at_points(da.chunk({"y": 4}), x, y, dates)  # lazy input is fine
    for i in range(20):
        want = da.sel(time=dates[i], x=x[i], y=y[i], method="nearest").values  # xarray's own selection
        np.testing.assert_allclose(got[i], want)
    with pytest.raises(InputError, match="point 1"):
        fractions_at_points(da, [400.0], [0.0], dates[:1])
