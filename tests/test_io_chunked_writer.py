"""Tests of the chunk encoding of unmix.io._chunked_writer (HDF5 shuffle + deflate done in dask tasks).

References used throughout:
* the decoder is CPython's ``zlib.decompress`` (the zlib library's inflate, as HDF5's deflate filter
  uses it; RFC 1950/1951) or HDF5's own filter pipeline through h5py;
* the shuffle is undone with plain ``bytes`` slicing written from the definition of HDF5's shuffle
  filter (H5Zshuffle.c: byte ``p`` of value ``i`` is stored at ``p * n + i``), not with numpy.
Whole products are read back with netCDF4, h5py and GDAL (rasterio); the parallel-write paths, the
filter flags a netCDF reader sees and float32 edge chunks of a product are tested in test_io_products.py.
"""

from __future__ import annotations

import zlib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from unmix.io import _chunked_writer
from unmix.io._chunked_writer import ChunkTarget, shuffle_bytes, zlib_chunk

DTYPES = ["<f4", "<f8", "i1", "<i2", "<i4", "<u2", ">f4"]
FILLS = {"f": np.nan, "i": -9, "u": 65535}


def _shuffle_by_definition(raw: bytes, size: int) -> bytes:
    """HDF5's shuffle filter from its definition: all bytes 0 of the values, then all bytes 1..."""
    return b"".join(raw[p::size] for p in range(size))


def _unshuffle_by_definition(shuffled: bytes, size: int) -> bytes:
    n = len(shuffled) // size
    out = bytearray(len(shuffled))
    for p in range(size):
        out[p::size] = shuffled[p * n:(p + 1) * n]
    return bytes(out)


def _values(dtype, shape, seed=0):
    """Values of ``dtype`` with what products hold: runs of fill, exact zeros, NaN/inf for floats."""
    rng = np.random.default_rng(seed)
    dtype = np.dtype(dtype)
    if dtype.kind == "f":
        values = rng.random(shape).astype(dtype)
        flat = values.reshape(-1)
        flat[: flat.size // 4] = np.nan  # a no-data run
        flat[flat.size // 2:flat.size // 2 + 40] = 0
        if flat.size > 3:
            flat[-3:] = [np.inf, -np.inf, -0.0]
    else:
        info = np.iinfo(dtype)
        values = rng.integers(max(info.min, -1000), min(info.max, 1000), shape, endpoint=True).astype(dtype)
        values.reshape(-1)[: values.size // 4] = FILLS[dtype.kind]
    return values


# -- the shuffle -------------------------------------------------------------------------------------

@pytest.mark.parametrize("dtype", DTYPES + ["<c8", "<c16"])
def test_shuffle_bytes_is_hdf5_shuffle(dtype):
    values = _values(dtype if np.dtype(dtype).kind != "c" else "<f4", (3, 17, 11)).astype(dtype)
    planes = shuffle_bytes(values)
    size = np.dtype(dtype).itemsize
    assert planes.shape == (size, values.size) and planes.dtype == np.uint8 and planes.flags.c_contiguous
    assert planes.tobytes() == _shuffle_by_definition(values.tobytes(), size)  # reference: the definition


@settings(max_examples=30, deadline=None)
@given(hnp.arrays(st.sampled_from([np.dtype(d) for d in DTYPES]), hnp.array_shapes(min_dims=1, max_dims=3, max_side=9)),
       st.integers(1, 3))
def test_shuffle_bytes_of_strided_views(values, step):
    view = values[..., ::step]  # a chunk cut from a larger block is not contiguous
    assert shuffle_bytes(view).tobytes() == _shuffle_by_definition(view.tobytes(), view.dtype.itemsize)


# -- one chunk: what HDF5's filters decode -----------------------------------------------------------

@pytest.mark.parametrize("level", range(10))
@pytest.mark.parametrize("dtype", DTYPES)
def test_encoded_chunk_decodes_to_the_original_bytes(dtype, level):
    values = _values(dtype, (1, 37, 29), seed=level)
    target = ChunkTarget("unused.nc", "v", values.shape, values.shape, np.dtype(dtype), FILLS[values.dtype.kind],
                         (2, 1), level)
    stream = target.encode_chunk(values)
    # RFC 1950, 2.2: CMF 0x78 = deflate with a 32 KiB window; CMF * 256 + FLG is a multiple of 31
    assert stream[0] == 0x78 and (stream[0] * 256 + stream[1]) % 31 == 0
    raw = _unshuffle_by_definition(zlib.decompress(stream), values.dtype.itemsize)  # reference: zlib's inflate
    assert raw == values.tobytes()
    np.testing.assert_array_equal(np.frombuffer(raw, values.dtype).reshape(values.shape), values)


@pytest.mark.parametrize("level", [1, 3, 6])
def test_filter_pipelines_without_shuffle_or_deflate(level):
    values = _values("<f4", (1, 40, 30), seed=2)
    strided = np.asfortranarray(values[0])  # not C-contiguous: stored in C order all the same
    for chunk in (values, strided):
        c_bytes = np.ascontiguousarray(chunk).tobytes()
        shuffled = _shuffle_by_definition(c_bytes, 4)
        for pipeline, decode, expected in [((2, 1), zlib.decompress, shuffled), ((1,), zlib.decompress, c_bytes),
                                           ((2,), bytes, shuffled), ((), bytes, c_bytes)]:
            target = ChunkTarget("unused.nc", "v", chunk.shape, chunk.shape, np.dtype("f4"), np.nan, pipeline, level)
            assert decode(target.encode_chunk(chunk)) == expected  # reference: zlib's inflate / the definition


def _fractions_like(rng, side=128):
    """Fractions of 3 endmembers summing to one, exact 0 and 1, NaN blobs: what the writer stores."""
    from scipy import ndimage

    logits = np.stack([ndimage.gaussian_filter(rng.standard_normal((side, side)), s) * 25 for s in (4, 9, 20)])
    frac = np.exp(logits - logits.max(axis=0))
    frac = np.clip(frac / frac.sum(axis=0) + rng.normal(0, 0.04, frac.shape), 0, None)
    frac = (frac / frac.sum(axis=0)).astype(np.float32)
    frac[frac < 0.01] = 0
    frac[:, frac.max(axis=0) > 0.99] = 1
    frac[:, ndimage.gaussian_filter(rng.standard_normal((side, side)), 6) > 0.08] = np.nan
    return frac


def test_levels_compress_like_zlib():
    frac = _fractions_like(np.random.default_rng(3), side=256)
    shuffled = _shuffle_by_definition(frac.tobytes(), 4)
    reference = len(zlib.compress(shuffled, 1))  # HDF5's own shuffle + deflate at level 1 (CPython's zlib)
    for level in (1, 2, 3):  # ISA-L: about zlib's level-1 size (measured 0.4 % larger on 512 x 512 chunks)
        assert len(zlib_chunk(frac, level)) < 1.03 * reference
    for level in (4, 9):  # CPython's zlib at that level: the very bytes zlib.compress gives
        assert zlib_chunk(frac, level) == zlib.compress(shuffled, level)
    with pytest.raises(zlib.error):
        zlib_chunk(frac, 10)


# -- chunks through ChunkTarget into an HDF5 file ----------------------------------------------------

@pytest.mark.parametrize("level", [1, 3, 9])
@pytest.mark.parametrize("dtype", ["<f4", "<f8", "i1", "<i2", "<i4"])
def test_edge_chunks_are_padded_with_the_fill_value(tmp_path, dtype, level):
    h5py = pytest.importorskip("h5py")
    values = _values(dtype, (2, 21, 37), seed=level)
    fill = np.dtype(dtype).type(FILLS[np.dtype(dtype).kind])
    path = tmp_path / "t.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("v", shape=values.shape, dtype=dtype, chunks=(1, 8, 16), shuffle=True, compression="gzip",
                         compression_opts=level, fillvalue=fill)
    target = ChunkTarget(str(path), "v", values.shape, (1, 8, 16), np.dtype(dtype), fill, (2, 1), level)
    try:
        for t in range(2):  # one dask block per date, each with edge chunks on y and x
            target[(slice(t, t + 1), slice(0, 21), slice(0, 37))] = values[t:t + 1]
    finally:
        _chunked_writer.release(str(path))
    with h5py.File(path, "r") as f:
        dset = f["v"]
        np.testing.assert_array_equal(dset[...], values)  # reference: HDF5's own shuffle + inflate filters
        filter_mask, raw = dset.id.read_direct_chunk((1, 16, 32))  # the corner chunk: 5 x 5 values
        assert filter_mask == 0  # every filter of the pipeline was applied
    stored = np.frombuffer(_unshuffle_by_definition(zlib.decompress(raw), values.itemsize), dtype).reshape(8, 16)
    np.testing.assert_array_equal(stored[:5, :5], values[1, 16:, 32:])
    np.testing.assert_array_equal(stored[5:], fill)  # HDF5 stores edge chunks full size: padding is the fill
    np.testing.assert_array_equal(stored[:, 5:], fill)


# -- a whole product --------------------------------------------------------------------------------

@pytest.mark.parametrize("complevel", [1, 3, 6])
def test_written_product_reads_back_bit_for_bit(tmp_path, complevel):
    """Fractions with runs, exact 0/1, NaN (also negative) and int16 counts through ``write_netcdf``,
    read by netCDF4, h5py (HDF5's own shuffle + inflate filters) and GDAL."""
    import dask.array as da
    import h5py
    import netCDF4
    import rasterio
    import xarray as xr

    from unmix.io.products import write_netcdf

    rng = np.random.default_rng(complevel)
    frac = np.stack([_fractions_like(rng, 160) for _ in range(2)])  # (time, endmember, y, x)
    frac[1, :, :40] = np.nan  # a no-data strip
    frac[0, 0, 50, 3] = np.nan * -1  # a negative NaN: bits must survive too
    count = rng.poisson(12, (2, 160, 160)).astype(np.int16)
    georef = {"crs_wkt": 'LOCAL_CS["arbitrary"]', "transform": (30.0, 0.0, -15.0, 0.0, -30.0, 4785.0)}
    ds = xr.Dataset(
        {"fractions": (("time", "endmember", "y", "x"), da.from_array(frac, chunks=(1, 3, 128, 96)),
                       {"units": "1", **georef}),
         "count": (("time", "y", "x"), da.from_array(count, chunks=(1, 128, 96)), georef)},
        coords={"time": np.array(["2020-01-01", "2021-01-01"], dtype="datetime64[ns]"),
                "endmember": ["a", "b", "c"], "y": 30.0 * np.arange(160.0)[::-1], "x": 30.0 * np.arange(160.0)},
    )
    path = write_netcdf(ds, tmp_path / "p.nc", complevel=complevel, scheduler="threads")
    with h5py.File(path, "r") as f:
        got_h5 = f["fractions"][...], f["count"][...]
        dset = f["fractions"].id
        assert f["fractions"].chunks == (1, 1, 128, 96)  # the dask blocks' size
        assert dset.get_num_chunks() == 2 * 3 * 2 * 2
        for i in range(dset.get_num_chunks()):  # every stored chunk is a zlib stream of the shuffled values
            t, e, y, x = offset = dset.get_chunk_info(i).chunk_offset
            filter_mask, raw = dset.read_direct_chunk(offset)
            assert filter_mask == 0
            stored = np.frombuffer(_unshuffle_by_definition(zlib.decompress(raw), 4), np.uint32)  # reference: zlib
            want = np.full((128, 96), np.float32(np.nan)).view(np.uint32)  # edge chunks: padded with the fill
            part = frac[t, e, y:y + 128, x:x + 96].view(np.uint32)
            want[:part.shape[0], :part.shape[1]] = part
            np.testing.assert_array_equal(stored.reshape(128, 96), want)
    with netCDF4.Dataset(path) as nc:
        nc.set_auto_mask(False)
        got_nc = np.asarray(nc["fractions"][...]), np.asarray(nc["count"][...])
    with rasterio.open(f"netcdf:{path}:fractions") as src:  # GDAL: bands over (time, endmember), time slowest
        got_gdal = src.read().reshape(frac.shape), None
    with rasterio.open(f"netcdf:{path}:count") as src:
        got_gdal = got_gdal[0], src.read()
    for got_frac, got_count in (got_h5, got_nc, got_gdal):
        np.testing.assert_array_equal(got_frac.view(np.uint32), frac.view(np.uint32))  # bit for bit
        assert got_count.dtype == np.int16
        np.testing.assert_array_equal(got_count, count)
