"""Tests of unmix.io.products: CF-NetCDF and COG writers, atomic writes, provenance.

Georeferencing is read back with tools outside the package: rasterio/GDAL and rioxarray.
"""

from __future__ import annotations

import json
import os
import zlib

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


# --------------------------------------------------------------------------------------------------
# compressed writes: chunks are shuffled + deflated in the dask tasks, HDF5 only stores them


def _edge_dataset(height, width, chunks_y, chunks_x, lazy=True, seed=3):
    """A dataset whose sizes are not multiples of the chunks (HDF5 edge chunks), with NaN and ints."""
    rng = np.random.default_rng(seed)
    frac = rng.random((len(DATES), 2, height, width)).astype(np.float32)
    frac[rng.random(frac.shape) < 0.05] = np.nan
    frac[1, :, :3, :] = np.nan  # a whole no-data strip
    labels = rng.integers(-3, 4, size=(2, height, width)).astype(np.int8)
    if lazy:
        arr = da.from_array(frac, chunks=((1, 1, 1), (2,), chunks_y, chunks_x))
        lab = da.from_array(labels, chunks=((1, 1), chunks_y, chunks_x))
    else:
        arr, lab = frac, labels
    x = TRANSFORM.c + TRANSFORM.a * (np.arange(width) + 0.5)
    y = TRANSFORM.f + TRANSFORM.e * (np.arange(height) + 0.5)
    georef = {"crs_wkt": CRS.to_wkt(), "transform": tuple(TRANSFORM)[:6]}
    ds = xr.Dataset(
        {
            "fractions": (("time", "endmember", "y", "x"), arr, {"units": "1", **georef}),
            "rmse": (("time", "y", "x"), arr[:, 0] * np.float32(0.01), {"units": "1", **georef}),
            "label": (("endmember", "y", "x"), lab, georef),
        },
        coords={"time": DATES, "endmember": ["green_vegetation", "bright_soil"], "y": y, "x": x},
    )
    return ds, {"fractions": frac, "rmse": frac[:, 0] * np.float32(0.01), "label": labels}


def _assert_reads_back(path, expected):
    """Values through three independent readers: netCDF4-python, xarray and GDAL (rasterio)."""
    with netCDF4.Dataset(path) as nc:
        for name, want in expected.items():
            var = nc[name]
            var.set_auto_mask(False)
            got = var[:]
            assert got.dtype == want.dtype
            np.testing.assert_array_equal(got, want)  # NaN where NaN, bit-equal elsewhere
    with xr.open_dataset(path, mask_and_scale=False) as back:
        for name, want in expected.items():
            assert back[name].dtype == want.dtype
            np.testing.assert_array_equal(back[name].values, want)
    # GDAL orders the bands of (time, y, x) by time
    with rasterio.open(f"netcdf:{path}:rmse") as src:
        np.testing.assert_array_equal(src.read(), expected["rmse"])
        assert src.dtypes[0] == "float32"


@pytest.mark.parametrize("complevel", [0, 1, 5])
@pytest.mark.parametrize(
    ("height", "width", "chunks_y", "chunks_x"),
    [
        (21, 37, (8, 8, 5), (16, 16, 5)),  # edge chunks on both axes
        (21, 37, (8, 5, 8), (10, 27)),  # dask blocks not on the chunk grid: rechunked before writing
        (9, 7, (9,), (7,)),  # one chunk smaller than nothing: whole image in one block
    ],
)
def test_compressed_values_read_back_exactly(tmp_path, complevel, height, width, chunks_y, chunks_x):
    ds, expected = _edge_dataset(height, width, chunks_y, chunks_x)
    path = write_netcdf(ds, tmp_path / "p.nc", complevel=complevel, scheduler="threads")
    _assert_reads_back(path, expected)
    with netCDF4.Dataset(path) as nc:
        for name in expected:
            filters = nc[name].filters()
            # the filters a netCDF reader sees are ordinary zlib + shuffle (none at level 0)
            assert bool(filters["zlib"]) == (complevel > 0) and bool(filters["shuffle"]) == (complevel > 0)
            if complevel:
                assert filters["complevel"] == complevel
            assert not filters["fletcher32"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.nc"]


def test_eager_dataset_is_compressed_in_parallel_path_too(tmp_path):
    ds, expected = _edge_dataset(21, 37, (8, 8, 5), (16, 16, 5), lazy=False)
    path = write_netcdf(ds, tmp_path / "p.nc", complevel=2)
    _assert_reads_back(path, expected)
    with netCDF4.Dataset(path) as nc:
        assert nc["fractions"].filters()["zlib"] and nc["fractions"].chunking() == [1, 1, 21, 37]  # eager: whole image per chunk (< 512 px)


def test_stored_chunks_are_hdf5_shuffle_then_deflate(tmp_path):
    h5py = pytest.importorskip("h5py")

    ds, expected = _edge_dataset(21, 37, (8, 8, 5), (16, 16, 5))
    path = write_netcdf(ds, tmp_path / "p.nc", complevel=3)
    with h5py.File(path, "r") as f:
        dset = f["fractions"]
        plist = dset.id.get_create_plist()
        codes = [plist.get_filter(i)[0] for i in range(plist.get_nfilters())]
        # HDF5 filter ids: 2 = shuffle, 1 = deflate, applied in this order when writing (HDF5 reference manual)
        assert codes == [2, 1]
        assert dset.chunks == (1, 1, 8, 16)
        # the last chunk of the grid is an edge chunk stored at full size: undo deflate and shuffle by hand
        mask, raw = dset.id.read_direct_chunk((2, 1, 16, 32))
        assert mask == 0
        unshuffled = np.frombuffer(zlib.decompress(raw), np.uint8).reshape(4, -1).T.copy().view(np.float32)
        chunk = unshuffled.reshape(8, 16)
        np.testing.assert_array_equal(chunk[:5, :5], expected["fractions"][2, 1, 16:21, 32:37])
        assert np.isnan(chunk[5:]).all() and np.isnan(chunk[:, 5:]).all()  # padded with the NaN fill value


def test_distributed_processes_write_the_same_file_contents(tmp_path):
    distributed = pytest.importorskip("distributed")
    ds, expected = _edge_dataset(21, 37, (8, 8, 5), (16, 16, 5))
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster:
        with distributed.Client(cluster) as client:
            def compute(delayed):
                client.compute(delayed).result()

            path = write_netcdf(ds, tmp_path / "p.nc", complevel=1, compute=compute)
    threads = write_netcdf(ds, tmp_path / "t.nc", complevel=1, scheduler="threads")
    _assert_reads_back(path, expected)
    a, b = open_product(path), open_product(threads)
    for name in expected:
        np.testing.assert_array_equal(a[name].values, b[name].values)
    assert sorted(p.name for p in tmp_path.iterdir() if not p.name.startswith("dask-")) == ["p.nc", "t.nc"]


@pytest.mark.parametrize("complevel", [0, 1])
def test_failure_after_some_chunks_leaves_no_file(tmp_path, complevel):
    from unmix.io import _chunked_writer

    ds, _ = _edge_dataset(21, 37, (8, 8, 5), (16, 16, 5))

    def broken(block, block_info=None):
        if block_info[0]["chunk-location"][0] == 2:  # the last date fails, earlier ones were written
            raise RuntimeError("disk full")
        return block

    ds["fractions"] = ds["fractions"].copy(data=ds["fractions"].data.map_blocks(broken, dtype=np.float32))
    with pytest.raises(RuntimeError, match="disk full"):
        write_netcdf(ds, tmp_path / "p.nc", complevel=complevel, scheduler="threads")
    assert list(tmp_path.iterdir()) == []  # neither the product nor its temporary file
    assert _chunked_writer._HANDLES == {}  # and no file handle left open


def test_chunk_target_bytes_decode_like_hdf5(tmp_path):
    """An h5py dataset (HDF5 compresses) and our direct chunks read back the same through HDF5."""
    h5py = pytest.importorskip("h5py")
    from unmix.io._chunked_writer import ChunkTarget

    rng = np.random.default_rng(5)
    data = rng.random((2, 40, 30)).astype(np.float32)
    data[0, :5] = np.nan
    path = tmp_path / "t.h5"
    with h5py.File(path, "w") as f:
        # h5py's own shuffle + gzip (deflate) pipeline, filled by HDF5 itself
        f.create_dataset("ref", data=data, chunks=(1, 16, 16), shuffle=True, compression="gzip", compression_opts=1,
                         fillvalue=np.float32(np.nan))
        f.create_dataset("ours", shape=data.shape, dtype="f4", chunks=(1, 16, 16), shuffle=True, compression="gzip",
                         compression_opts=1, fillvalue=np.float32(np.nan))
    target = ChunkTarget(str(path), "ours", data.shape, (1, 16, 16), np.dtype("f4"), np.float32(np.nan), (2, 1), 1)
    target[(slice(0, 2), slice(0, 40), slice(0, 30))] = data  # one block, edge chunks on y and x
    from unmix.io import _chunked_writer

    _chunked_writer.release(str(path))
    with h5py.File(path, "r") as f:
        np.testing.assert_array_equal(f["ours"][...], data)
        np.testing.assert_array_equal(f["ours"][...], f["ref"][...])


def test_unexpected_filter_pipeline_falls_back_to_hdf5(tmp_path):
    """A dataset with a filter we do not reproduce (Fletcher-32 checksum) is written by HDF5 itself."""
    h5py = pytest.importorskip("h5py")
    from unmix.io import _chunked_writer

    path = tmp_path / "t.h5"
    data = np.random.default_rng(2).random((20, 30)).astype(np.float32)
    with h5py.File(path, "w") as f:
        f.create_dataset("v", shape=data.shape, dtype="f4", chunks=(8, 16), shuffle=True, compression="gzip",
                         fletcher32=True)
    with h5py.File(path, "r") as f:
        target = _chunked_writer._target_for(f, str(path), "v")
    assert target.pipeline is None
    target[(slice(0, 20), slice(0, 30))] = data
    _chunked_writer.release(str(path))
    with h5py.File(path, "r") as f:
        np.testing.assert_array_equal(f["v"][...], data)
