"""Tests of unmix.io.stack: reading GeoTIFF folders / file lists / NetCDF cubes as lazy cubes.

Expected values come from the fixtures in conftest.py (arrays written with rasterio/xarray there),
from rasterio's own transform arithmetic, and from Python's calendar (datetime) for dates.
"""

from __future__ import annotations

import datetime as dt
import pickle

import dask
import numpy as np
import pytest
import rasterio
from affine import Affine
from conftest import BANDS, CRS, NODATA

from unmix.errors import BandMismatchError, GridMismatchError, InputError, StackReadError, UnknownNameError
from unmix.io.stack import date_from_name, open_stack, read_dates_csv


def test_folder_int16_scaled_reads_lazily_as_float32_reflectance(make_stack):
    info = make_stack()
    cube = open_stack(info.folder, band_names=BANDS, scale=1e-4)
    assert cube.dims == ("time", "band", "y", "x")
    assert dask.is_dask_collection(cube)
    assert cube.dtype == np.float32
    assert list(cube["band"].values) == list(BANDS)
    np.testing.assert_array_equal(cube["time"].values.astype("datetime64[D]"), np.array(info.dates))
    # values: int16 * 1e-4 as written by the fixture; nodata (-9999) -> NaN in that band only
    np.testing.assert_allclose(cube.values, info.reflectance, rtol=0, atol=1e-7)
    assert np.isnan(cube.values[0, :, 2, 3]).all()
    assert np.isnan(cube.values[1, 4, 5, 7]) and np.isfinite(cube.values[1, 3, 5, 7])


def test_pixel_centres_crs_and_transform_match_rasterio(make_stack):
    info = make_stack()
    cube = open_stack(info.files, band_names=BANDS, scale=1e-4)
    with rasterio.open(info.files[0]) as src:
        rows, cols = np.arange(src.height), np.arange(src.width)
        xs, _ = rasterio.transform.xy(src.transform, np.zeros_like(cols), cols, offset="center")
        _, ys = rasterio.transform.xy(src.transform, rows, np.zeros_like(rows), offset="center")
        assert rasterio.crs.CRS.from_wkt(cube.attrs["crs_wkt"]) == src.crs
        assert rasterio.crs.CRS.from_wkt(cube["spatial_ref"].attrs["crs_wkt"]) == src.crs
        assert tuple(cube.attrs["transform"]) == tuple(src.transform)[:6]
    np.testing.assert_allclose(cube["x"].values, xs)
    np.testing.assert_allclose(cube["y"].values, ys)
    assert cube["x"].attrs["standard_name"] == "projection_x_coordinate"


def test_chunks_follow_tiles_one_date_all_bands(make_stack):
    info = make_stack(height=40, width=36, blocksize=16)
    cube = open_stack(info.folder, band_names=BANDS, scale=1e-4, chunks=20)  # rounded up to 2 tiles = 32
    assert cube.chunks[0] == (1,) * len(info.dates)
    assert cube.chunks[1] == (len(BANDS),)
    assert cube.chunks[2] == (32, 8) and cube.chunks[3] == (32, 4)
    np.testing.assert_allclose(cube.values, info.reflectance, rtol=0, atol=1e-7)
    # the graph carries paths, not open files: it pickles (needed by process-based workers)
    pickle.loads(pickle.dumps(dict(cube.data.__dask_graph__())))


def test_gdal_scale_metadata_is_used_and_arguments_override(make_stack):
    info = make_stack(gdal_scale=True)
    from_meta = open_stack(info.folder, band_names=BANDS).values
    np.testing.assert_allclose(from_meta, info.reflectance, rtol=0, atol=1e-7)
    doubled = open_stack(info.folder, band_names=BANDS, scale=2e-4, offset=0.01).values
    np.testing.assert_allclose(doubled, info.reflectance * 2 + 0.01, rtol=0, atol=1e-6)


def test_float_storage_equals_int16_scaled(make_stack):
    ints = make_stack(storage="int16", folder="ints")
    floats = make_stack(storage="float32", folder="floats")
    a = open_stack(ints.folder, band_names=BANDS, scale=1e-4).values
    b = open_stack(floats.folder, band_names=BANDS).values
    # same reflectance up to the int16 quantum (1e-4 / 2); NaN at the same places
    np.testing.assert_array_equal(np.isnan(a), np.isnan(b))
    np.testing.assert_allclose(a, b, rtol=0, atol=5.1e-5)


@pytest.mark.parametrize("style", ["iso", "compact", "doy"])
def test_dates_from_three_name_patterns(make_stack, style):
    info = make_stack(name_style=style)
    cube = open_stack(info.folder, band_names=BANDS, scale=1e-4)
    np.testing.assert_array_equal(cube["time"].values.astype("datetime64[D]"), np.array(info.dates))


def test_date_from_name_precedence_and_calendar():
    # calendar facts (datetime): day 60 of leap year 2020 is 29 February, of 2019 is 1 March
    assert date_from_name("x_2020060.tif") == np.datetime64(dt.date(2020, 2, 29))
    assert date_from_name("x_2019060.tif") == np.datetime64(dt.date(2019, 3, 1))
    assert date_from_name("x_2019366.tif") is None  # 2019 has 365 days
    # YYYY-MM-DD beats an 8-digit run; the leftmost date of a pattern wins
    assert date_from_name("20200823_scene_2020-01-15.tif") == np.datetime64("2020-01-15")
    assert date_from_name("LC08_038037_20200115_20200823.tif") == np.datetime64("2020-01-15")
    # an 8-digit run is never read as a day of year, and impossible dates are skipped
    assert date_from_name("a_20201345_20200301.tif") == np.datetime64("2020-03-01")
    # the folder is not searched
    assert date_from_name("/data/2020-01-01/scene.tif") is None


def test_dates_from_csv_and_missing_date_error(make_stack, tmp_path):
    info = make_stack(name_style="none")
    with pytest.raises(InputError, match=r"scene_a\.tif.*--dates"):
        open_stack(info.folder, band_names=BANDS, scale=1e-4)
    csv_path = tmp_path / "dates.csv"
    rows = ["file,date"] + [f"{f.name},{d}" for f, d in zip(info.files, info.dates)]
    csv_path.write_text("\n".join(rows) + "\n")
    assert read_dates_csv(csv_path)[info.files[0].name] == info.dates[0]
    cube = open_stack(info.folder, band_names=BANDS, scale=1e-4, dates=csv_path)
    np.testing.assert_array_equal(cube["time"].values.astype("datetime64[D]"), np.array(info.dates))
    # a file left out of the CSV is named
    csv_path.write_text("\n".join(rows[:-1]) + "\n")
    with pytest.raises(InputError, match=info.files[-1].name):
        open_stack(info.folder, band_names=BANDS, scale=1e-4, dates=csv_path)


def test_unsorted_files_are_sorted_by_date_and_duplicates_refused(make_stack, write_geotiff):
    info = make_stack(dates=("2021-05-01", "2019-05-01", "2020-05-01"))
    cube = open_stack(info.files, band_names=BANDS, scale=1e-4)
    assert list(cube["time"].values.astype("datetime64[D]").astype(str)) == ["2019-05-01", "2020-05-01", "2021-05-01"]
    np.testing.assert_allclose(cube.values[0], info.reflectance[1], atol=1e-7)
    dup = info.folder / "copy_20190501.tif"
    dup.write_bytes(info.files[1].read_bytes())
    with pytest.raises(InputError, match="same date"):
        open_stack(info.folder, band_names=BANDS, scale=1e-4)


def test_band_names_count_mismatch_names_file_and_counts(make_stack):
    info = make_stack()
    with pytest.raises(BandMismatchError, match=r"5 band names.*scene_2019-03-01\.tif.*6"):
        open_stack(info.folder, band_names=BANDS[:5], scale=1e-4)


def test_band_names_from_descriptions_or_sensor(make_stack):
    info = make_stack(descriptions=True)
    cube = open_stack(info.folder, scale=1e-4, sensor="landsat-8-oli")
    assert list(cube["band"].values) == list(BANDS)
    plain = make_stack(folder="plain")
    # Landsat 4-5 TM has six reflective bands B1-B5, B7, the count of the files
    tm = open_stack(plain.folder, scale=1e-4, sensor="landsat-5-tm")
    assert list(tm["band"].values) == ["B1", "B2", "B3", "B4", "B5", "B7"]
    # OLI has more bands than the files: the error says so and how to fix it
    with pytest.raises(BandMismatchError, match="--band-names"):
        open_stack(plain.folder, scale=1e-4, sensor="landsat-8-oli")


def test_qa_band_bits_mask_pixels(make_stack):
    info = make_stack(qa="band", descriptions=True)
    cube = open_stack(info.folder, scale=1e-4, qa="QA_PIXEL", qa_bits=(3, 1))
    values = cube.values
    assert list(cube["band"].values) == list(BANDS)  # the QA band is not reflectance
    expected = info.reflectance.copy()
    qa = info.extra["qa"]
    bad = (qa & ((1 << 3) | (1 << 1))) != 0  # bits set by the fixture, tested with numpy
    expected[np.broadcast_to(bad[:, None], expected.shape)] = np.nan
    np.testing.assert_allclose(values, expected, rtol=0, atol=1e-7)
    assert np.isnan(values[:, :, 0, 0]).all() and np.isnan(values[2, :, 10, 10]).all()
    assert np.isfinite(values[3, :, 11, 11]).all()  # bit 5 was not asked for
    # by number (1-based, the 7th band) gives the same
    by_number = open_stack(info.folder, scale=1e-4, qa=7, qa_bits=(3, 1), band_names=BANDS).values
    np.testing.assert_array_equal(np.isnan(by_number), np.isnan(values))
    with pytest.raises(UnknownNameError, match="QA_PIXEL"):
        open_stack(info.folder, scale=1e-4, qa="CLOUDS", qa_bits=(3,))


def test_qa_files_folder(make_stack):
    info = make_stack(qa="files")
    cube = open_stack(info.folder, band_names=BANDS, scale=1e-4, qa=info.extra["qa_folder"], qa_bits=(3,))
    values = cube.values
    assert np.isnan(values[:, :, 0, 0]).all()
    assert np.isfinite(values[2, :, 10, 10]).all()  # bit 1 not asked for


def _other_grid_file(info, write_geotiff, *, crs=CRS, transform=None, shape=None, name="scene_2021-01-01.tif"):
    h, w = shape or info.reflectance.shape[2:]
    data = np.full((len(BANDS), h, w), 1000, np.int16)
    return write_geotiff(info.folder / name, data, crs=crs, transform=transform or info.transform, nodata=NODATA)


@pytest.mark.parametrize(
    "kind, pattern",
    [("crs", r"CRS"), ("transform", r"transform"), ("shape", r"shape 30 x 20 vs 24 x 20")],
)
def test_grid_mismatch_names_file_and_difference(make_stack, write_geotiff, kind, pattern):
    info = make_stack()
    if kind == "crs":
        _other_grid_file(info, write_geotiff, crs="EPSG:32634")
    elif kind == "transform":
        _other_grid_file(info, write_geotiff, transform=Affine(30.0, 0.0, 500015.0, 0.0, -30.0, 4100000.0))
    else:
        _other_grid_file(info, write_geotiff, shape=(30, 20))
    with pytest.raises(GridMismatchError, match=rf"scene_2021-01-01\.tif.*{pattern}"):
        open_stack(info.folder, band_names=BANDS, scale=1e-4)


def test_align_warps_shifted_date_onto_first_grid(make_stack, write_geotiff):
    info = make_stack(dates=("2019-03-01",))
    h, w = info.reflectance.shape[2:]
    rng = np.random.default_rng(3)
    shifted = rng.integers(100, 3000, size=(len(BANDS), h, w)).astype(np.int16)
    # one pixel (30 m) east of the first grid
    write_geotiff(info.folder / "scene_2020-01-01.tif", shifted, nodata=NODATA,
                  transform=Affine(30.0, 0.0, 500030.0, 0.0, -30.0, 4100000.0))
    with pytest.raises(GridMismatchError):
        open_stack(info.folder, band_names=BANDS, scale=1e-4)
    cube = open_stack(info.folder, band_names=BANDS, scale=1e-4, align=True, resampling="nearest")
    out = cube.values[1]
    # geometry: column j of the first grid is column j-1 of the shifted file; column 0 lies outside it
    np.testing.assert_allclose(out[:, :, 1:], shifted[:, :, :-1].astype(np.float32) * np.float32(1e-4), atol=1e-7)
    assert np.isnan(out[:, :, 0]).all()
    np.testing.assert_allclose(cube.values[0], info.reflectance[0], atol=1e-7)


def test_truncated_and_garbage_files_are_named(make_stack):
    info = make_stack()
    data = info.files[1].read_bytes()
    info.files[1].write_bytes(data[: len(data) // 2])
    with pytest.raises(StackReadError, match=info.files[1].name):
        open_stack(info.folder, band_names=BANDS, scale=1e-4)
    info.files[1].write_bytes(b"this is not a tiff at all" * 10)
    with pytest.raises(StackReadError, match=info.files[1].name):
        open_stack(info.folder, band_names=BANDS, scale=1e-4)


def test_read_failure_during_compute_is_a_stack_read_error(make_stack):
    info = make_stack()
    cube = open_stack(info.folder, band_names=BANDS, scale=1e-4)
    info.files[2].write_bytes(b"gone")  # damaged after the stack was opened
    with pytest.raises(StackReadError, match=info.files[2].name):
        cube.compute(scheduler="threads")


def test_empty_folder_and_missing_source(tmp_path):
    (tmp_path / "empty").mkdir()
    with pytest.raises(StackReadError, match="no GeoTIFFs"):
        open_stack(tmp_path / "empty")
    with pytest.raises(StackReadError, match="not found"):
        open_stack(tmp_path / "nowhere")


def test_netcdf_cube(make_netcdf_stack):
    info = make_netcdf_stack()
    cube = open_stack(info.files[0])
    assert cube.dims == ("time", "band", "y", "x") and dask.is_dask_collection(cube)
    assert cube.chunks[0] == (1,) * len(info.dates)
    np.testing.assert_array_equal(cube["time"].values.astype("datetime64[D]"), np.array(info.dates))  # sorted
    assert list(cube["band"].values) == list(BANDS)
    np.testing.assert_allclose(cube.values, info.reflectance, rtol=0, atol=0)
    assert rasterio.crs.CRS.from_wkt(cube.attrs["crs_wkt"]) == rasterio.crs.CRS.from_user_input(CRS)
    assert tuple(cube.attrs["transform"]) == pytest.approx(tuple(info.transform)[:6])
    with pytest.raises(BandMismatchError):
        open_stack(info.files[0], band_names=BANDS[:4])


def test_netcdf_read_failure_during_compute_is_a_stack_read_error(make_netcdf_stack):
    info = make_netcdf_stack()
    path = info.files[0]
    cube = open_stack(path)
    pickle.loads(pickle.dumps(dict(cube.data.__dask_graph__())))  # still a graph process workers can take
    size = path.stat().st_size
    with open(path, "r+b") as fh:  # truncated after the stack was opened, before anything was read
        fh.truncate(size // 2)
    with pytest.raises(StackReadError, match=rf"{path.name}.*truncated"):
        cube.compute(scheduler="threads")


def test_netcdf_cube_has_one_grid_so_align_is_a_no_op(make_netcdf_stack):
    info = make_netcdf_stack()
    plain = open_stack(info.files[0]).values
    aligned = open_stack(info.files[0], align=True).values
    np.testing.assert_array_equal(aligned, plain)  # nothing to warp: one grid for every date


def test_netcdf_cube_must_lie_on_a_given_reference_grid(make_netcdf_stack, write_geotiff):
    info = make_netcdf_stack()
    h, w = info.reflectance.shape[2:]
    same = write_geotiff(info.folder / "same.tif", np.zeros((1, h, w), np.int16), transform=info.transform)
    other = write_geotiff(info.folder / "other.tif", np.zeros((1, h, w), np.int16),
                          transform=Affine(30.0, 0.0, 500030.0, 0.0, -30.0, 4100000.0))  # one pixel east
    # a reference on another grid is refused, not silently ignored
    with pytest.raises(GridMismatchError, match=r"cube\.nc.*other\.tif.*transform"):
        open_stack(info.files[0], align=True, reference=other)
    cube = open_stack(info.files[0], align=True, reference=same)
    np.testing.assert_allclose(cube.values, info.reflectance, rtol=0, atol=0)


def test_netcdf_cube_dates_come_from_its_time_coordinate(make_netcdf_stack):
    info = make_netcdf_stack()
    with pytest.raises(InputError, match="time coordinate"):
        open_stack(info.files[0], dates=["2020-01-01"] * len(info.dates))


# --------------------------------------------------------------------------------------------------
# decoding into band-last chunks


def _decode_reference(raw, scales, offsets, nodata):
    """numpy reference: float32(raw) * float32(scale) + float32(offset), NaN where raw == nodata (per band)."""
    out = raw.astype(np.float32) * np.float32(scales)[:, None, None] + np.float32(offsets)[:, None, None]
    for b, nd in enumerate(nodata):
        if nd is not None:
            out[b][raw[b] == nd] = np.nan
    return out


@pytest.mark.parametrize("dtype", ["int16", "uint16", "float32"])
@pytest.mark.parametrize("uniform", [True, False])
def test_decode_bands_last_equals_numpy_decode(dtype, uniform):
    from unmix.io.stack._numba import decode_bands, decode_bands_last

    rng = np.random.default_rng(3)
    for case in range(4):
        nb, ny, nx = 1 + case * 2, 5 + case, 7
        raw = rng.integers(0, 12000, size=(nb, ny, nx)).astype(dtype)
        nd_value = 0 if dtype != "float32" else -1.0
        raw[rng.random(raw.shape) < 0.1] = nd_value
        if uniform:
            scales, offsets = [1e-4] * nb, [0.0] * nb
            nodata = [nd_value if case % 2 == 0 else None] * nb
        else:
            scales = list(rng.uniform(1e-5, 1e-3, nb))
            offsets = list(rng.uniform(-0.2, 0.1, nb))
            nodata = [nd_value if b % 2 == 0 else None for b in range(nb)]
        has = np.array([nd is not None for nd in nodata])
        nd_arr = np.array([0.0 if nd is None else nd for nd in nodata])
        ref = _decode_reference(raw, scales, offsets, nodata)
        band_last = np.empty((ny, nx, nb), np.float32)
        decode_bands_last(np.ascontiguousarray(np.moveaxis(raw, 0, -1)), np.array(scales), np.array(offsets),
                          nd_arr, has, band_last)
        np.testing.assert_array_equal(np.moveaxis(band_last, -1, 0), ref)  # bit for bit, NaN at the same places
        band_first = np.empty((nb, ny, nx), np.float32)
        decode_bands(raw, np.array(scales), np.array(offsets), nd_arr, has, band_first)
        np.testing.assert_array_equal(band_first, ref)


@pytest.mark.parametrize("interleave", ["pixel", "band"])
def test_chunks_are_band_last_views_with_values_as_read_by_rasterio(tmp_path, interleave):
    rng = np.random.default_rng(5)
    data = rng.integers(-500, 11000, size=(len(BANDS), 40, 36)).astype(np.int16)
    data[:, 3, 4] = NODATA
    data[2, 10, 11] = NODATA
    path = tmp_path / "scene_2020-01-01.tif"
    with rasterio.open(path, "w", driver="GTiff", width=36, height=40, count=len(BANDS), dtype="int16", crs=CRS,
                       transform=Affine(30, 0, 500000, 0, -30, 4100000), nodata=NODATA, tiled=True,
                       blockxsize=16, blockysize=16, compress="deflate", interleave=interleave) as dst:
        dst.write(data)
    cube = open_stack([path], band_names=BANDS, scale=1e-4, chunks=32)
    chunk = cube.data.to_delayed()[0, 0, 0, 0].compute(scheduler="sync")  # the chunk as a task returns it
    # band-last memory: the kernel can take np.moveaxis(chunk, 1, -1) without a copy
    assert np.moveaxis(chunk, 1, -1).flags.c_contiguous
    with rasterio.open(path) as src:  # reference: rasterio's own read and numpy decoding
        raw = src.read()
    ref = _decode_reference(raw, [1e-4] * len(BANDS), [0.0] * len(BANDS), [NODATA] * len(BANDS))
    np.testing.assert_array_equal(cube.values[0], ref)


def test_band_descriptions_naming_roles_are_understood(write_geotiff, tmp_path):
    # a file whose bands are described 'Blue', 'Green', 'Red', 'NIR', 'SWIR1', 'SWIR2' (as some tools write
    # them): with the OLI sensor they are B2..B7 (USGS OLI band designations), never silently ignored
    from unmix.errors import BandMismatchError

    data = np.arange(6 * 4 * 5, dtype=np.float32).reshape(6, 4, 5) / 1000
    roles = ["Blue", "Green", "Red", "NIR", "SWIR1", "SWIR2"]
    (tmp_path / "s").mkdir()
    (tmp_path / "m").mkdir()
    write_geotiff(tmp_path / "s" / "scene_2020-05-01.tif", data, descriptions=roles, dtype="float32")
    cube = open_stack(tmp_path / "s", sensor="landsat-8-oli")
    assert [str(b) for b in cube["band"].values] == ["B2", "B3", "B4", "B5", "B6", "B7"]
    tm = open_stack(tmp_path / "s", sensor="landsat-5-tm")
    assert [str(b) for b in tm["band"].values] == ["B1", "B2", "B3", "B4", "B5", "B7"]
    write_geotiff(tmp_path / "m" / "scene_2020-05-01.tif", data, descriptions=roles[:5] + ["thermal"],
                  dtype="float32")
    with pytest.raises(BandMismatchError, match="'thermal'"):
        open_stack(tmp_path / "m", sensor="landsat-8-oli")
