"""Tests of unmix.io.products: CF-NetCDF and COG writers, atomic writes, provenance.

Georeferencing is read back with tools outside the package: rasterio/GDAL and rioxarray.
"""

from __future__ import annotations

import json
import os

import dask
import dask.array as da
import netCDF4
import numpy as np
import pytest
import rasterio
import xarray as xr
from affine import Affine

from unmix.errors import OutputExistsError
from unmix.io.products import CAUTION, open_product, write_cog, write_netcdf

TRANSFORM = Affine(30.0, 0.0, 500000.0, 0.0, -30.0, 4100000.0)
CRS = rasterio.crs.CRS.from_epsg(32633)
DATES = np.array(["2019-03-01", "2019-07-15", "2020-03-01"], dtype="datetime64[ns]")


def _dataset(height=20, width=24, lazy=True, chunk=8):
    rng = np.random.default_rng(1)
    frac = rng.random((len(DATES), 2, height, width)).astype(np.float32)
    frac[0, :, 1, 1] = np.nan
    arr = da.from_array(frac, chunks=(1, 2, chunk, chunk)) if lazy else frac
    x = TRANSFORM.c + TRANSFORM.a * (np.arange(width) + 0.5)
    y = TRANSFORM.f + TRANSFORM.e * (np.arange(height) + 0.5)
    georef = {"crs_wkt": CRS.to_wkt(), "transform": tuple(TRANSFORM)[:6]}
    ds = xr.Dataset(
        {
            "fractions": (("time", "endmember", "y", "x"), arr, {"units": "1", **georef}),
            "rmse": (("time", "y", "x"), arr[:, 0] * 0.01, {"units": "1", **georef}),
            "valid_count": (("y", "x"), np.full((height, width), 3, np.int32), georef),
        },
        coords={"time": DATES, "endmember": ["green_vegetation", "bright_soil"], "y": y, "x": x},
        attrs={"constraint": "fcls", **georef},
    )
    return ds, frac


def test_netcdf_georeferencing_reads_back_in_gdal_and_rioxarray(tmp_path):
    ds, frac = _dataset()
    path = write_netcdf(ds, tmp_path / "p.nc")
    # GDAL (through rasterio) reads the CRS and the geotransform of a variable
    with rasterio.open(f"netcdf:{path}:fractions") as src:
        assert src.crs == CRS
        assert src.transform.almost_equals(TRANSFORM)
    # rioxarray with decode_coords="all"
    import rioxarray  # noqa: F401  (registers the .rio accessor)

    with xr.open_dataset(path, decode_coords="all") as back:
        assert back["fractions"].rio.crs == CRS
        assert back["fractions"].rio.transform().almost_equals(TRANSFORM)
        np.testing.assert_array_equal(back["fractions"].values, frac)
        np.testing.assert_array_equal(back["time"].values, DATES)


def test_netcdf_cf_layout_and_provenance(tmp_path):
    ds, _ = _dataset()
    path = write_netcdf(ds, tmp_path / "p.nc", command="unmix fractions stack/", parameters={"constraint": "fcls"},
                        input_files=["a.tif", "b.tif"])
    with netCDF4.Dataset(path) as nc:
        assert nc.Conventions == "CF-1.8"
        assert nc["fractions"].grid_mapping == "spatial_ref"
        assert nc["fractions"].dtype == np.float32 and np.isnan(nc["fractions"]._FillValue)
        assert nc["fractions"].filters()["zlib"]
        assert max(nc["fractions"].chunking()[2:]) <= 512
        assert "GeoTransform" in nc["spatial_ref"].ncattrs() and "crs_wkt" in nc["spatial_ref"].ncattrs()
        assert nc["x"].standard_name == "projection_x_coordinate" and nc["x"].units == "m"
        assert nc["y"].standard_name == "projection_y_coordinate"
        assert nc["time"].units.startswith("days since")
        # dates decoded with netCDF4's own calendar code
        decoded = netCDF4.num2date(nc["time"][:], nc["time"].units, nc["time"].calendar)
        assert [d.strftime("%Y-%m-%d") for d in decoded] == ["2019-03-01", "2019-07-15", "2020-03-01"]
        assert list(nc["endmember"][:]) == ["green_vegetation", "bright_soil"]
        assert nc.command == "unmix fractions stack/"
        assert json.loads(nc.parameters) == {"constraint": "fcls"}
        assert nc.endmember_names == "green_vegetation, bright_soil"
        assert nc.input_files == "a.tif, b.tif"
        assert nc.caution == CAUTION
        for attr in ("unmix_version", "created", "history", "title"):
            assert attr in nc.ncattrs()
        assert "institution" not in nc.ncattrs()


def test_open_product_is_lazy_and_keeps_georeferencing(tmp_path):
    ds, frac = _dataset()
    path = write_netcdf(ds, tmp_path / "p.nc")
    product = open_product(path)
    assert dask.is_dask_collection(product["fractions"])
    assert rasterio.crs.CRS.from_wkt(product["fractions"].attrs["crs_wkt"]) == CRS
    assert Affine(*product["fractions"].attrs["transform"]).almost_equals(TRANSFORM)
    np.testing.assert_array_equal(product["fractions"].values, frac)
    # written again (e.g. by a later step) without losing the grid
    again = write_netcdf(product, tmp_path / "again.nc")
    with rasterio.open(f"netcdf:{again}:fractions") as src:
        assert src.crs == CRS and src.transform.almost_equals(TRANSFORM)


def test_existing_product_untouched_without_overwrite(tmp_path):
    ds, _ = _dataset()
    path = write_netcdf(ds, tmp_path / "p.nc")
    before, mtime = path.read_bytes(), os.stat(path).st_mtime_ns
    with pytest.raises(OutputExistsError, match="overwrite"):
        write_netcdf(ds, path)
    assert path.read_bytes() == before and os.stat(path).st_mtime_ns == mtime
    write_netcdf(ds.isel(time=[0]), path, overwrite=True)
    assert open_product(path).sizes["time"] == 1


def test_failed_write_leaves_no_file(tmp_path):
    ds, _ = _dataset()

    def broken(block):
        raise RuntimeError("disk full")

    ds["fractions"] = ds["fractions"].copy(data=ds["fractions"].data.map_blocks(broken, dtype=np.float32))
    with pytest.raises(RuntimeError, match="disk full"):
        write_netcdf(ds, tmp_path / "p.nc")
    assert list(tmp_path.iterdir()) == []
    # an existing product survives a failed overwrite
    good, _ = _dataset()
    path = write_netcdf(good, tmp_path / "p.nc")
    before = path.read_bytes()
    with pytest.raises(RuntimeError):
        write_netcdf(ds, path, overwrite=True)
    assert path.read_bytes() == before and sorted(p.name for p in tmp_path.iterdir()) == ["p.nc"]


def test_cog_band_descriptions_are_dates_and_layout_is_cog(tmp_path):
    ds, frac = _dataset(height=600, width=520, chunk=256)
    path = write_cog(ds["fractions"].sel(endmember="bright_soil"), tmp_path / "soil.tif", blocksize=256,
                     tags={"command": "test"})
    with rasterio.open(path) as src:
        assert src.descriptions == ("2019-03-01", "2019-07-15", "2020-03-01")
        assert src.dtypes == ("float32",) * 3 and np.isnan(src.nodata)
        assert src.crs == CRS and src.transform.almost_equals(TRANSFORM)
        assert src.block_shapes[0] == (256, 256)
        assert src.overviews(1)  # reduced-resolution levels for quick display
        assert src.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG"  # GDAL's own COG marker
        assert src.tags()["command"] == "test"
        np.testing.assert_array_equal(src.read(), frac[:, 1])
    before = path.read_bytes()
    with pytest.raises(OutputExistsError):
        write_cog(ds["fractions"].sel(endmember="bright_soil"), path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["soil.tif"]
