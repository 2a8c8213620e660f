"""Tests of the direct GeoTIFF block reader (unmix.io.stack._tiff_blocks: tifffile + imagecodecs) against GDAL.

Reference throughout: rasterio's (GDAL's) own read of the same window, decoded with numpy as
float32(stored) * float32(scale) + float32(offset), NaN where stored == nodata. The files are
written with rasterio (GDAL's GTiff driver) into tmp_path in many layouts; layouts the direct
reader does not handle must fall back to GDAL (``tile_layout`` gives None) with the same values.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import rasterio
from affine import Affine

from unmix.errors import StackReadError
from unmix.io.stack import open_stack
from unmix.io.stack.geotiff import _DateReader, _read_header

CRS = "EPSG:32612"
TRANSFORM = Affine(30.0, 0.0, 400000.0, 0.0, -30.0, 3500000.0)
HEIGHT, WIDTH, NB = 45, 37, 4  # not multiples of the 16 / 32 pixel tiles
WINDOWS = [(0, HEIGHT, 0, WIDTH), (5, 29, 3, 34), (17, 18, 31, 32), (32, 45, 16, 37), (0, 7, 30, 37)]


def _data(dtype, seed):
    rng = np.random.default_rng(seed)
    if dtype == "float32":
        data = rng.normal(0.2, 0.3, size=(NB, HEIGHT, WIDTH)).astype(np.float32)
        data[:, 7, 9] = np.nan
    else:
        info = np.iinfo(dtype)
        # the full range of the type, so the predictor's wrap-around is exercised
        data = rng.integers(info.min, info.max, size=(NB, HEIGHT, WIDTH), endpoint=True).astype(dtype)
        data[:, 10:14, 4:9] = data[:, 10:11, 4:5]  # flat patches give zero differences
    return data


def _write(path, data, *, nodata=None, scales=None, offsets=None, **options):
    profile = dict(driver="GTiff", width=WIDTH, height=HEIGHT, count=NB, dtype=str(data.dtype), crs=CRS,
                   transform=TRANSFORM, nodata=nodata, **options)
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data)
        if scales is not None:
            dst.scales = scales
            dst.offsets = offsets
    return path


def _gdal_reference(path, window, band_indexes, scales, offsets, nodata):
    """rasterio/GDAL read of the window, decoded with numpy: (y, x, band) float32."""
    row0, row1, col0, col1 = window
    with rasterio.open(path) as src:
        raw = src.read(list(band_indexes), window=rasterio.windows.Window(col0, row0, col1 - col0, row1 - row0))
    out = raw.astype(np.float32) * np.float32(scales)[:, None, None] + np.float32(offsets)[:, None, None]
    if nodata is not None:
        out[raw == nodata] = np.nan
    return np.moveaxis(out, 0, -1)


def _reader(head, band_indexes, scales, offsets, *, direct=True):
    return _DateReader(path=str(head.path), date="2020-01-01", band_indexes=tuple(band_indexes), scales=tuple(scales),
                       offsets=tuple(offsets), nodata=tuple(head.nodata[i - 1] for i in band_indexes),
                       identity=head.identity, tiles=head.tiles if direct else None)


LAYOUTS = list(itertools.product(
    ["int16", "uint16", "float32"], [1, 2], ["none", "deflate"], [16, 32], ["pixel", "band"], [False, True],
))


@pytest.mark.parametrize("dtype, predictor, compress, block, interleave, with_nodata", LAYOUTS)
def test_direct_blocks_equal_gdal_bit_for_bit(tmp_path, dtype, predictor, compress, block, interleave, with_nodata):
    data = _data(dtype, seed=block + predictor)
    nodata = None
    if with_nodata:
        nodata = -3.5 if dtype == "float32" else int(data[1, 3, 3])  # a value that occurs in the data
        data[:, 20, 20] = nodata
    options = dict(tiled=True, blockxsize=block, blockysize=block, interleave=interleave)
    if compress != "none":
        options.update(compress=compress, predictor=predictor)
    path = _write(tmp_path / "scene_2020-01-01.tif", data, nodata=nodata, **options)
    head = _read_header(path)
    if dtype == "float32" and predictor == 2 and compress != "none":
        # libtiff differences the bit patterns of floats as integers; tifffile's decoder would
        # subtract floats, so this layout goes to GDAL (same values below either way)
        assert head.tiles is None
    else:
        assert head.tiles is not None  # this layout is read directly
        assert head.tiles.planar == (interleave == "band")
    rng = np.random.default_rng(block)
    scales, offsets = rng.uniform(1e-5, 1e-3, NB), rng.uniform(-0.2, 0.1, NB)
    for bands in ([1, 2, 3, 4], [2, 4]):  # all bands, and a subset (as with a QA band in the file)
        s, o = scales[: len(bands)], offsets[: len(bands)]
        reader = _reader(head, bands, s, o)
        for window in WINDOWS:
            got = np.moveaxis(reader(window)[0], 0, -1)
            ref = _gdal_reference(path, window, bands, s, o, nodata)
            np.testing.assert_array_equal(got, ref)  # bit for bit, NaN at the same places


@pytest.mark.parametrize("interleave", ["pixel", "band"])
@pytest.mark.parametrize("compress", ["none", "deflate"])
def test_floating_point_predictor_and_strips(tmp_path, interleave, compress):
    data = _data("float32", seed=9)
    layouts = [dict(tiled=True, blockxsize=16, blockysize=16), dict(tiled=False, blockysize=7)]  # 45 = 6 x 7 + 3
    for k, options in enumerate(layouts):
        extra = dict(compress="deflate", predictor=3) if compress == "deflate" else {}
        path = _write(tmp_path / f"f{k}.tif", data, interleave=interleave, **options, **extra)
        head = _read_header(path)
        assert head.tiles is not None and head.tiles.strips == (not options["tiled"])
        reader = _reader(head, [1, 2, 3, 4], [1.0] * NB, [0.0] * NB)
        for window in WINDOWS:
            np.testing.assert_array_equal(np.moveaxis(reader(window)[0], 0, -1),
                                          _gdal_reference(path, window, [1, 2, 3, 4], [1.0] * NB, [0.0] * NB, None))


@pytest.mark.parametrize("dtype", ["uint8", "int8", "int32", "uint32"])
def test_other_integer_types_with_horizontal_predictor_on_strips(tmp_path, dtype):
    data = _data(dtype, seed=4)
    path = _write(tmp_path / "s.tif", data, tiled=False, blockysize=8, compress="deflate", predictor=2)
    head = _read_header(path)
    assert head.tiles is not None
    reader = _reader(head, [1, 2, 3, 4], [2e-4] * NB, [0.01] * NB)
    for window in WINDOWS:
        np.testing.assert_array_equal(np.moveaxis(reader(window)[0], 0, -1),
                                      _gdal_reference(path, window, [1, 2, 3, 4], [2e-4] * NB, [0.01] * NB, None))


@pytest.mark.parametrize("predictor", [1, 2])
def test_lzw_blocks_are_read_directly_with_gdal_values(tmp_path, predictor):
    data = _data("uint16", seed=5)
    path = _write(tmp_path / "scene_2020-01-01.tif", data, nodata=7, tiled=True, blockxsize=16, blockysize=16,
                  compress="lzw", predictor=predictor)
    head = _read_header(path)
    assert head.tiles is not None and head.tiles.compression == 5  # LZW (TIFF 6.0 section 13)
    reader = _reader(head, [1, 2, 3, 4], [1e-4] * NB, [0.0] * NB)
    for window in WINDOWS:
        np.testing.assert_array_equal(np.moveaxis(reader(window)[0], 0, -1),
                                      _gdal_reference(path, window, [1, 2, 3, 4], [1e-4] * NB, [0.0] * NB, 7))


@pytest.mark.parametrize("options", [
    dict(tiled=True, blockxsize=16, blockysize=16, compress="packbits"),
    dict(tiled=True, blockxsize=16, blockysize=16, compress="deflate", endianness="big"),
    dict(tiled=True, blockxsize=16, blockysize=16, compress="deflate", predictor=2, dtype="float32"),
], ids=["packbits", "big-endian", "float-horizontal-predictor"])
def test_other_layouts_fall_back_to_gdal_with_the_same_values(tmp_path, options):
    options = dict(options)
    data = _data(options.pop("dtype", "int16"), seed=2)
    path = _write(tmp_path / "scene_2020-01-01.tif", data, nodata=-9999, **options)
    head = _read_header(path)
    assert head.tiles is None  # read through GDAL
    reader = _reader(head, [1, 2, 3, 4], [1e-4] * NB, [0.0] * NB)
    for window in WINDOWS[:2]:
        np.testing.assert_array_equal(np.moveaxis(reader(window)[0], 0, -1),
                                      _gdal_reference(path, window, [1, 2, 3, 4], [1e-4] * NB, [0.0] * NB, -9999))


def test_sparse_file_falls_back_to_gdal(tmp_path):
    path = tmp_path / "sparse.tif"
    with rasterio.open(path, "w", driver="GTiff", width=WIDTH, height=HEIGHT, count=NB, dtype="int16", crs=CRS,
                       transform=TRANSFORM, nodata=0, tiled=True, blockxsize=16, blockysize=16, compress="deflate",
                       sparse_ok=True) as dst:
        dst.write(np.full((NB, 16, 16), 7, np.int16), window=rasterio.windows.Window(0, 0, 16, 16))
    head = _read_header(path)
    assert head.tiles is None  # unwritten tiles have offset 0: GDAL fills them with nodata
    reader = _reader(head, [1, 2, 3, 4], [1.0] * NB, [0.0] * NB)
    np.testing.assert_array_equal(np.moveaxis(reader(WINDOWS[0])[0], 0, -1),
                                  _gdal_reference(path, WINDOWS[0], [1, 2, 3, 4], [1.0] * NB, [0.0] * NB, 0))


def test_open_stack_reads_directly_with_file_scale_and_offset(tmp_path):
    folder = tmp_path / "stack"
    folder.mkdir()
    paths = []
    for k, date in enumerate(["2020-01-01", "2020-02-01"]):
        data = _data("int16", seed=k)
        data[:, 3, 5] = -9999
        paths.append(_write(folder / f"scene_{date}.tif", data, nodata=-9999, scales=[1e-4, 2e-4, 1e-4, 3e-4],
                            offsets=[0.0, -0.1, 0.05, 0.0], tiled=True, blockxsize=16, blockysize=16,
                            compress="deflate", predictor=2))
    cube = open_stack(folder, chunks=16)
    tasks = dict(cube.data.__dask_graph__()).values()
    readers = [arg for task in tasks for arg in (task if isinstance(task, tuple) else getattr(task, "args", ()))
               if isinstance(arg, _DateReader)]
    assert readers and all(r.tiles is not None for r in readers)  # the graph's tasks take the direct path
    values = cube.values
    for k, path in enumerate(paths):
        ref = _gdal_reference(path, WINDOWS[0], [1, 2, 3, 4], [1e-4, 2e-4, 1e-4, 3e-4], [0.0, -0.1, 0.05, 0.0], -9999)
        np.testing.assert_array_equal(np.moveaxis(values[k], 0, -1), ref)


def _tile_offsets(path):
    import tifffile

    with tifffile.TiffFile(path) as tif:
        return tif.pages.first.dataoffsets


def test_corrupt_tile_is_a_stack_read_error_naming_file_date_rows_columns(tmp_path):
    data = _data("int16", seed=1)
    path = _write(tmp_path / "scene_2020-03-04.tif", data, tiled=True, blockxsize=16, blockysize=16,
                  compress="deflate", predictor=2)
    head = _read_header(path)
    k = head.tiles.n_cols + 1  # tile (1, 1): rows 16-32, columns 16-32
    with open(path, "r+b") as fh:  # a damaged tile behind an intact header
        fh.seek(_tile_offsets(path)[k])
        fh.write(b"\xff" * 12)
    cube = open_stack([path], chunks=16)
    with pytest.raises(StackReadError, match=r"scene_2020-03-04\.tif \(date 2020-03-04\), rows 16-32, columns 16-32"):
        cube.compute(scheduler="sync")
    # a cut-short copy: the tile index points past the end, found when the stack is opened
    path.write_bytes(path.read_bytes()[: _tile_offsets(path)[k] + 5])
    with pytest.raises(StackReadError, match=r"scene_2020-03-04\.tif is truncated or damaged: tile \(1, 1\) of band 1"):
        open_stack([path], chunks=16)


def test_block_reads_without_pread_give_the_same_bytes(tmp_path, monkeypatch):
    # reference: the same file read by position with os.pread (POSIX); Windows has no pread, so the
    # reader falls back to lseek + read on its own descriptor
    import os

    from unmix.io.stack import _tiff_blocks

    path = tmp_path / "bytes.bin"
    payload = bytes(range(256)) * 1000
    path.write_bytes(payload)
    fd = os.open(path, os.O_RDONLY)
    try:
        expected = [os.pread(fd, 5000, 1234), os.pread(fd, 10_000, len(payload) - 100)]
        monkeypatch.delattr(os, "pread")
        got = [_tiff_blocks._pread(fd, 5000, 1234), _tiff_blocks._pread(fd, 10_000, len(payload) - 100)]
    finally:
        os.close(fd)
    assert got == expected
    assert got[1] == payload[-100:]


def test_cloud_optimized_geotiff_with_overviews_is_read_directly(tmp_path):
    from rasterio.shutil import copy

    data = _data("int16", seed=8)
    plain = _write(tmp_path / "plain.tif", data, nodata=-9999)
    path = tmp_path / "scene_2020-01-01.tif"
    copy(plain, path, driver="COG", compress="deflate", predictor=2, blocksize=16, overview_resampling="nearest")
    with rasterio.open(path) as src:
        assert src.overviews(1)  # the COG carries reduced-resolution images after the first directory
    head = _read_header(path)
    assert head.tiles is not None and head.tiles.block_h == 16
    reader = _reader(head, [1, 2, 3, 4], [1e-4] * NB, [0.0] * NB)
    for window in WINDOWS:
        np.testing.assert_array_equal(np.moveaxis(reader(window)[0], 0, -1),  # reference: GDAL's read
                                      _gdal_reference(path, window, [1, 2, 3, 4], [1e-4] * NB, [0.0] * NB, -9999))


def test_a_window_reads_only_its_own_tiles_and_the_reader_pickles(tmp_path, monkeypatch):
    import math
    import pickle

    from unmix.io.stack import _tiff_blocks

    data = _data("int16", seed=3)
    path = _write(tmp_path / "scene_2020-01-01.tif", data, tiled=True, blockxsize=16, blockysize=16,
                  compress="deflate", predictor=2)
    head = _read_header(path)
    reader = pickle.loads(pickle.dumps(_reader(head, [1, 2, 3, 4], [1.0] * NB, [0.0] * NB)))  # as dask.distributed ships it
    offsets = set(_tile_offsets(path))
    seen = []
    real = _tiff_blocks._pread
    monkeypatch.setattr(_tiff_blocks, "_pread", lambda fd, count, offset: seen.append(offset) or real(fd, count, offset))
    for row0, row1, col0, col1 in WINDOWS:
        seen.clear()
        got = np.moveaxis(reader((row0, row1, col0, col1))[0], 0, -1)
        # tiles of 16 x 16 pixels overlapping the window (TIFF 6.0 section 15: tiles in row-major order)
        expected = (math.ceil(row1 / 16) - row0 // 16) * (math.ceil(col1 / 16) - col0 // 16)
        assert len(seen) == len(set(seen)) == expected and set(seen) <= offsets
        np.testing.assert_array_equal(got, _gdal_reference(path, (row0, row1, col0, col1), [1, 2, 3, 4], [1.0] * NB,
                                                           [0.0] * NB, None))
