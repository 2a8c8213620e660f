"""Tests of unmix.io.products.trend_cogs on a synthetic trend product large enough for overviews.

The Cloud-Optimized layout is checked with two outside readers: GDAL (through rasterio: the
``LAYOUT=COG`` marker its COG driver reads back from the file's leading ghost area, tiles,
overviews) and tifffile (the IFDs: full resolution first, then reduced-resolution levels, every IFD
before the first tile, overview tiles before the full-resolution ones, as the COG layout asks; from
the GDAL COG driver documentation).
"""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
import tifffile
import xarray as xr
from affine import Affine

from unmix.io.products.claim import ProductSet
from unmix.io.products.trend_cogs import pam_xml, trend_cog_paths, write_trend_cogs
from unmix.report.palettes import RULE_COLOURS, TRAJECTORY_PALETTE
from unmix.trajectory import FLAG_MEANINGS, FLAG_VALUES

TRANSFORM = Affine(20.0, 0.0, 300000.0, 0.0, -20.0, 5000000.0)
CRS = rasterio.crs.CRS.from_epsg(32632)


def _product(ny=300, nx=260):
    rng = np.random.default_rng(3)
    codes = np.full((2, ny, nx), 5, np.int8)  # insufficient_data
    codes[:, ::2, ::2] = 0  # every 2 x 2 block: one stable, three insufficient_data -> mode is 5, mean 3.75
    slope = rng.normal(0, 0.01, (2, ny, nx)).astype(np.float32)
    slope[:, :10, :10] = np.nan
    dates = np.full((2, ny, nx), np.datetime64("NaT"), "datetime64[ns]")
    dates[0, 50:60, 40:80] = np.datetime64("2020-07-02")
    rule = rng.integers(0, 2, (ny, nx)).astype(np.uint8)
    rule[:5] = 255
    x = TRANSFORM.c + TRANSFORM.a * (np.arange(nx) + 0.5)
    y = TRANSFORM.f + TRANSFORM.e * (np.arange(ny) + 0.5)
    georef = {"crs_wkt": CRS.to_wkt(), "transform": tuple(TRANSFORM)[:6]}
    ds = xr.Dataset(
        {"trajectory": (("endmember", "y", "x"), codes, {"flag_values": FLAG_VALUES, "flag_meanings": FLAG_MEANINGS}),
         "slope": (("endmember", "y", "x"), slope, {"units": "1/yr"}),
         "q_value": (("endmember", "y", "x"), rng.uniform(0, 1, (2, ny, nx)).astype(np.float32), {"units": "1"}),
         "change_date": (("endmember", "y", "x"), dates),
         "loss": (("y", "x"), rule, {"flag_values": np.array([0, 1, 255], np.uint8),
                                     "flag_meanings": "false true insufficient_data", "rule": "soil:increase"})},
        coords={"endmember": ["soil", "shrub"], "y": y, "x": x}, attrs=georef)
    for v in ds.data_vars.values():
        v.attrs.update(georef)
    return ds


@pytest.fixture
def written(tmp_path):
    product = _product()
    paths = trend_cog_paths(tmp_path, ["loss"])
    with ProductSet(paths) as products:
        out = write_trend_cogs(product, tmp_path, rule_names=["loss"], tags={"command": "test"}, products=products,
                               colours={"trajectory": TRAJECTORY_PALETTE, "rule": RULE_COLOURS}, blocksize=128)
    assert sorted(out) == sorted(paths)
    return product, tmp_path


@pytest.mark.parametrize("name", ["trajectory.tif", "slope.tif", "q_value.tif", "change_date.tif", "rule_loss.tif"])
def test_every_map_is_a_cloud_optimized_geotiff(written, name):
    _, folder = written
    with rasterio.open(folder / name) as src:
        assert src.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG"
        assert src.block_shapes[0] == (128, 128)
        # halved until the image fits one 128-pixel tile: 300x260, 150x130, 75x65 (GDAL COG driver docs)
        assert src.overviews(1) == [2, 4]
        assert src.crs == CRS and src.transform.almost_equals(TRANSFORM)
        assert src.nodata is not None
    with tifffile.TiffFile(folder / name) as tif:
        pages = list(tif.pages)
        assert len(pages) == 3 and all(p.is_tiled for p in pages)
        assert (pages[0].imagelength, pages[0].imagewidth) == (300, 260) and not pages[0].is_reduced
        assert all(p.is_reduced for p in pages[1:])  # NewSubfileType: reduced-resolution image (TIFF 6.0)
        first_tile = min(min(o for o in p.dataoffsets if o) for p in pages)
        assert max(p.offset for p in pages) < first_tile  # every IFD before the image data
        assert min(pages[-1].dataoffsets) < min(pages[0].dataoffsets)  # smallest overview's tiles first


def test_values_nodata_and_overview_resampling(written):
    product, folder = written
    with rasterio.open(folder / "trajectory.tif") as src:
        np.testing.assert_array_equal(src.read(), product["trajectory"].values)
        level = src.read(1, out_shape=(150, 130))  # GDAL picks the 2x overview
    assert (level == 5).all()  # mode of (0, 5, 5, 5); an average would give 3 or 4
    with rasterio.open(folder / "slope.tif") as src:
        assert src.units == ("1/yr", "1/yr")
        np.testing.assert_array_equal(src.read(), product["slope"].values)
    with rasterio.open(folder / "change_date.tif") as src:
        years = src.read()
    # 2020-07-02 is day 184 of the 366-day year 2020: 2020 + 183/366 = 2020.5 (calendar arithmetic)
    assert np.isnan(years).sum() == years.size - 400 and (years[0, 50:60, 40:80] == np.float32(2020.5)).all()
    with rasterio.open(folder / "rule_loss.tif") as src:
        np.testing.assert_array_equal(src.read(1), product["loss"].values)
        assert src.nodata == 255 and src.tags(1)["rule"] == "soil:increase"


def test_pam_xml_is_read_by_gdal(tmp_path):
    """A tiny paletted-less GeoTIFF plus our .aux.xml: GDAL (rasterio) returns the colour table from it."""
    path = tmp_path / "c.tif"
    with rasterio.open(path, "w", driver="GTiff", width=4, height=4, count=1, dtype="uint8", crs=CRS,
                       transform=TRANSFORM) as dst:
        dst.write(np.zeros((1, 4, 4), np.uint8))
    (tmp_path / "c.tif.aux.xml").write_text(pam_xml([({0: "a", 2: "c"}, {0: (1, 2, 3, 255), 2: (7, 8, 9, 255)})]))
    with rasterio.open(path) as src:
        cmap = src.colormap(1)
    assert cmap[0] == (1, 2, 3, 255) and cmap[2] == (7, 8, 9, 255) and cmap[1][3] == 0


def test_change_date_without_any_abrupt_pixel(tmp_path):
    product = _product(ny=8, nx=6)
    product["change_date"][:] = np.datetime64("NaT", "ns")
    with ProductSet(trend_cog_paths(tmp_path, [])) as products:
        write_trend_cogs(product, tmp_path, rule_names=[], tags={}, products=products,
                         colours={"trajectory": TRAJECTORY_PALETTE, "rule": RULE_COLOURS})
    with rasterio.open(tmp_path / "change_date.tif") as src:
        assert np.isnan(src.read()).all()
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "change_date.tif", "q_value.tif", "slope.tif", "trajectory.tif", "trajectory.tif.aux.xml"]
