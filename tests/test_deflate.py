"""Tests of unmix.io._deflate (+ _deflate_numba): the zlib-stream encoder of the NetCDF writer.

The reference decoder throughout is CPython's ``zlib.decompress`` (the zlib library's inflate, as
HDF5's deflate filter uses it; RFC 1950/1951). The reference shuffle is a numpy byte transpose of
the values' memory (HDF5's shuffle filter), the reference checksum ``zlib.adler32``, the reference
encoder for sizes ``zlib.compress``.
"""

from __future__ import annotations

import heapq
import zlib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from unmix.io._adler32_numba import adler32
from unmix.io._deflate import shuffle_bytes, zlib_chunk, zlib_stream
from unmix.io._deflate_numba import MIN_RUN, find_runs
from unmix.io._huffman_numba import huffman_lengths


def _shuffled(values):
    """HDF5's shuffle filter by hand: byte p of every value, p = 0..itemsize-1 (memory order)."""
    values = np.ascontiguousarray(values)
    return values.view(np.uint8).reshape(-1, values.dtype.itemsize).T.tobytes()


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


# -- round trips through the reference inflate -------------------------------------------------------

def _adversarial():
    rng = np.random.default_rng(7)
    fib = [1, 1]
    while len(fib) < 26:
        fib.append(fib[-1] + fib[-2])
    skew = rng.permutation(np.repeat(np.arange(26, dtype=np.uint8), fib))  # code lengths hit 15 bits
    runs = np.repeat(rng.integers(0, 256, 3000).astype(np.uint8), rng.integers(1, 80, 3000))
    return {
        "empty": np.zeros(0, np.uint8),
        "one byte": np.array([200], np.uint8),
        "all equal": np.full(70001, 0x41, np.uint8),
        "all 256 symbols": np.arange(256 * 300, dtype=np.int64).astype(np.uint8),
        "random 65535": rng.integers(0, 256, 65535).astype(np.uint8),
        "random 65536": rng.integers(0, 256, 65536).astype(np.uint8),
        "random 65537": rng.integers(0, 256, 65537).astype(np.uint8),
        "run over 65535": np.concatenate([rng.integers(0, 256, 65520), np.zeros(40), rng.integers(0, 256, 9)]).astype(
            np.uint8),
        "skewed 15-bit codes": skew,
        "runs of every length": runs,
        "one symbol dominates": np.where(rng.random(200003) < 0.9999, 7, rng.integers(0, 256, 200003)).astype(np.uint8),
        # the sampled histogram sees only zeros, every other byte is random: Huffman must give way to stored blocks
        "misleading sample": np.where(np.arange(262144) % 16 == 0, 0, rng.integers(1, 256, 262144)).astype(np.uint8),
    }


@pytest.mark.parametrize("level", [1, 2, 3, 4, 9])
@pytest.mark.parametrize("name", list(_adversarial()))
def test_zlib_stream_of_adversarial_bytes(name, level):
    data = _adversarial()[name]
    segments = [data, data[::-1].copy(), data[: data.size // 3]]
    stream = zlib_stream(segments, level)
    assert zlib.decompress(stream) == b"".join(s.tobytes() for s in segments)  # reference: zlib's inflate
    raw = 3 * data.size
    # never much worse than stored blocks: 5 bytes per 64 KiB block + headers (RFC 1951, 3.2.4)
    assert len(stream) <= raw + 5 * (raw // 65535 + 3) + 3 * 160 + 16 + raw // MIN_RUN * 9


@pytest.mark.parametrize("level", [1, 2, 3, 6])
@pytest.mark.parametrize("dtype", ["<f4", ">f4", "<f8", "<i2", "u1", "<c8", "<c16"])
@pytest.mark.parametrize("n", [0, 1, 3, 4099, 16385])
def test_zlib_chunk_is_shuffle_then_deflate(dtype, n, level):
    rng = np.random.default_rng(n)
    values = (rng.normal(0, 1, n) * 1000).astype(dtype)
    if values.dtype.kind in "fc" and n > 2:
        values[: n // 3] = np.nan  # a no-data run
        values[-1:] = np.inf
        values[n // 2:n // 2 + 40] = 0
    stream = zlib_chunk(values, level)
    assert zlib.decompress(stream) == _shuffled(values)  # reference: numpy transpose + zlib's inflate
    unshuffled = zlib_chunk(values, level, shuffle=False)
    assert zlib.decompress(unshuffled) == values.tobytes()
    np.testing.assert_array_equal(shuffle_bytes(values).reshape(-1), np.frombuffer(_shuffled(values), np.uint8))


@pytest.mark.parametrize("level", [1, 2, 3])
def test_zlib_chunk_of_special_floats(level):
    values = np.array([np.nan, -np.nan, np.inf, -np.inf, 0.0, -0.0, 1.0, np.finfo(np.float32).tiny,
                       np.finfo(np.float32).max] * 3003, np.float32).reshape(27, 1001)
    nan_payload = np.frombuffer(np.uint32(0x7FC00001).tobytes(), np.float32)[0]  # NaN payloads survive
    values[3, 5] = nan_payload
    assert zlib.decompress(zlib_chunk(values, level)) == _shuffled(values)


@settings(max_examples=30, deadline=None)
@given(
    n_values=st.integers(0, 40000),
    run_share=st.floats(0, 1),
    alphabet=st.integers(1, 256),
    level=st.sampled_from([1, 2, 3]),
    seed=st.integers(0, 2**32 - 1),
)
def test_zlib_chunk_round_trips(n_values, run_share, alphabet, level, seed):
    rng = np.random.default_rng(seed)
    values = rng.integers(0, alphabet, 4 * n_values).astype(np.uint8).view(np.float32).copy()
    lengths = rng.geometric(1 / 40, size=n_values // 20 + 1)
    for start, length in zip(rng.integers(0, max(n_values, 1), lengths.size), lengths):
        if n_values and rng.random() < run_share:  # runs of repeated values (fill, zeros) of random lengths
            values[start:start + length] = values[start]
    assert zlib.decompress(zlib_chunk(values, level)) == _shuffled(values)


@settings(max_examples=40, deadline=None)
@given(
    sizes=st.lists(st.integers(0, 70000), min_size=1, max_size=4),
    alphabet=st.integers(1, 256),
    level=st.sampled_from([1, 2, 3, 5]),
    seed=st.integers(0, 2**32 - 1),
)
def test_zlib_stream_round_trips(sizes, alphabet, level, seed):
    rng = np.random.default_rng(seed)
    segments = [rng.integers(0, alphabet, n).astype(np.uint8) for n in sizes]
    # reference decoder: the zlib library (RFC 1950 / 1951)
    assert zlib.decompress(zlib_stream(segments, level)) == b"".join(s.tobytes() for s in segments)


def _planes(kind, n, rng):
    if kind == "random":
        return rng.integers(0, 256, n).astype(np.uint8)
    if kind == "constant":
        return np.full(n, 7, np.uint8)
    if kind == "ramp":  # looks uniform byte by byte, but repeats: only match search finds it
        return (np.arange(n) % 256).astype(np.uint8)
    return rng.choice(np.array([0x3E, 0x3F, 0x7F], np.uint8), size=n, p=[0.6, 0.35, 0.05])  # exponent-like


@pytest.mark.parametrize("level", [1, 3, 4, 9])
@pytest.mark.parametrize(
    "layout",
    [
        [("random", 262144), ("random", 262144), ("skewed", 262144), ("skewed", 262144)],  # float32 chunk
        [("random", 65535), ("constant", 65536), ("ramp", 200001)],  # stored-block edges (65535 bytes)
        [("skewed", 10)],  # shorter than the trial sample
        [("random", 1)],
        [("constant", 0), ("random", 5)],
        [],
    ],
)
def test_zlib_stream_is_standard_zlib(level, layout):
    rng = np.random.default_rng(level)
    segments = [_planes(kind, n, rng) for kind, n in layout]
    stream = zlib_stream(segments, level)
    # the reference decoder: the zlib library's inflate, as HDF5's deflate filter uses it (RFC 1950/1951)
    assert zlib.decompress(stream) == b"".join(s.tobytes() for s in segments)
    raw = sum(s.size for s in segments)
    if layout and all(kind == "random" for kind, _ in layout):
        # incompressible planes are copied into stored blocks: 5 bytes per 64 KiB + 6 bytes of zlib frame
        assert len(stream) <= raw + 5 * (raw // 65535 + len(layout)) + 8
    if raw > 100000 and any(kind in ("constant", "skewed") for kind, _ in layout):
        assert len(stream) < 0.9 * raw  # compressible planes are compressed


# -- sizes against zlib ------------------------------------------------------------------------------

def test_fraction_chunks_are_about_as_small_as_zlib_level_1():
    frac = _fractions_like(np.random.default_rng(3))
    raw = _shuffled(frac)
    reference = len(zlib.compress(raw, 1))  # HDF5's own shuffle + deflate at level 1
    sizes = {level: len(zlib_chunk(frac, level)) for level in (1, 2, 3)}
    assert sizes[1] < 1.03 * reference  # level 1 skips planes that would shrink by less than 10 %
    assert sizes[3] <= sizes[2] < reference  # levels 2-3 code every plane that shrinks
    assert zlib.decompress(zlib_chunk(frac, 1)) == raw


def test_runs_are_coded_as_matches():
    chunk = np.full((512, 512), np.nan, np.float32)  # an edge chunk of fill values
    chunk[:3, :7] = np.random.default_rng(0).random((3, 7))
    for level in (1, 2, 3):
        stream = zlib_chunk(chunk, level)
        assert zlib.decompress(stream) == _shuffled(chunk)
        # zlib level 1 on the same bytes, as HDF5 writes them: runs are matches there too (RFC 1951, 3.2.5)
        assert len(stream) < 2 * len(zlib.compress(_shuffled(chunk), 1)) + 64
        assert len(stream) < 0.005 * chunk.nbytes


def test_stored_planes_are_bounded_by_their_size():
    rng = np.random.default_rng(4)
    values = rng.integers(0, 2**32, 300000, dtype=np.uint64).astype(np.uint32).view(np.float32)
    stream = zlib_chunk(values, 1)
    assert zlib.decompress(stream) == _shuffled(values)
    # RFC 1951, 3.2.4: 5 bytes per stored block of at most 65535 bytes; zlib frame 6 bytes; final block 2
    assert len(stream) <= values.nbytes + 5 * (values.nbytes // 65535 + 4) + 8


# -- the parts -------------------------------------------------------------------------------------

@pytest.mark.parametrize("n", [0, 1, 5551, 5552, 5553, 100003])
@pytest.mark.parametrize("fill", ["random", "ones"])
def test_adler32_matches_zlib(n, fill):
    rng = np.random.default_rng(n)
    data = rng.integers(0, 256, n).astype(np.uint8) if fill == "random" else np.full(n, 255, np.uint8)  # max sums
    assert adler32(data, 1) == zlib.adler32(data)  # reference: zlib's Adler-32 (RFC 1950, 9)
    assert adler32(data, 12345678) == zlib.adler32(data, 12345678)


def _runs_by_numpy(plane, min_run):
    """Maximal runs of one byte value, by numpy: the obvious way."""
    if plane.size == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    edges = np.flatnonzero(np.diff(plane.astype(np.int16)) != 0) + 1
    starts = np.r_[0, edges]
    lengths = np.diff(np.r_[starts, plane.size])
    keep = lengths >= min_run
    return starts[keep], lengths[keep]


@settings(max_examples=40, deadline=None)
@given(n=st.integers(0, 5000), first=st.integers(0, 17), mean_run=st.integers(1, 60), min_run=st.integers(15, 40),
       seed=st.integers(0, 2**32 - 1))
def test_find_runs_matches_numpy(n, first, mean_run, min_run, seed):
    rng = np.random.default_rng(seed)
    values = rng.integers(0, 3, n // mean_run + 1).astype(np.uint8)
    plane = np.repeat(values, rng.geometric(1 / mean_run, values.size))[:n]
    buffer = np.zeros((first + plane.size + 7) // 8 + 1, np.uint64)
    data = buffer.view(np.uint8)[:first + plane.size]
    data[first:] = plane
    data[:first] = plane[0] if plane.size else 0  # bytes before the plane must not join its runs
    starts, lengths = find_runs(data, buffer, first, plane.size, min_run)
    ref_starts, ref_lengths = _runs_by_numpy(plane, min_run)
    np.testing.assert_array_equal(starts, ref_starts)
    np.testing.assert_array_equal(lengths, ref_lengths)


def _huffman_cost(freq):
    """Total bits of an optimal (unlimited) Huffman code, by the textbook heap merge (Huffman 1952)."""
    heap = [int(f) for f in freq if f > 0]
    if len(heap) == 1:
        return heap[0]
    heapq.heapify(heap)
    cost = 0
    while len(heap) > 1:
        merged = heapq.heappop(heap) + heapq.heappop(heap)
        cost += merged
        heapq.heappush(heap, merged)
    return cost


@settings(max_examples=60, deadline=None)
@given(freq=st.lists(st.integers(0, 10**6), min_size=2, max_size=286))
def test_huffman_lengths_are_optimal(freq):
    freq = np.array(freq, np.int64)
    if (freq > 0).sum() < 1:
        freq[0] = 1
    lengths = huffman_lengths(freq, 64)
    assert ((lengths > 0) == (freq > 0)).all()
    assert np.sum(2.0 ** -lengths[lengths > 0].astype(float)) <= 1.0  # Kraft's inequality: a prefix code exists
    assert np.sum(freq * lengths) == _huffman_cost(freq)  # as short as the textbook construction


def _fibonacci_plane(rng):
    """Byte counts in Fibonacci proportion: the most skewed counts, so the deepest Huffman codes."""
    counts = [1, 1]
    while len(counts) < 26:
        counts.append(counts[-1] + counts[-2])
    plane = np.repeat(np.arange(len(counts), dtype=np.uint8), counts)
    return rng.permutation(plane)


@pytest.mark.parametrize("limit", [7, 10, 15])
def test_huffman_code_lengths_respect_the_limit(limit):
    plane = _fibonacci_plane(np.random.default_rng(0))
    freq = np.bincount(plane, minlength=257).astype(np.int64)
    freq[256] = 1  # end of block
    unlimited = huffman_lengths(freq, 64)
    lengths = huffman_lengths(freq, limit)
    # Kraft's inequality (a prefix code exists) and the length limit (RFC 1951: 15 bits for literals)
    for code in (unlimited, lengths):
        assert np.sum(2.0 ** -code[code > 0].astype(float)) <= 1.0
        assert ((code > 0) == (freq > 0)).all()
    assert lengths.max() <= limit
    # optimality of the unlimited code: no worse than the limited one, and within 1 bit of the entropy (Shannon)
    p = freq[freq > 0] / freq.sum()
    entropy = -np.sum(p * np.log2(p)) * freq.sum()
    assert entropy <= np.sum(freq * unlimited) <= np.sum(freq * lengths)
    assert np.sum(freq * unlimited) < entropy + freq.sum()


@pytest.mark.parametrize("level", [1, 6])
def test_zlib_stream_of_skewed_bytes(level):
    rng = np.random.default_rng(0)
    plane = _fibonacci_plane(rng)
    tail = rng.integers(0, 256, 1000).astype(np.uint8)
    stream = zlib_stream([plane, tail], level)
    assert zlib.decompress(stream) == plane.tobytes() + tail.tobytes()  # reference: zlib's inflate
    assert len(stream) < 0.5 * plane.size  # under 2 bits per byte: the skew is used


def test_chunk_target_pipelines():
    """The bytes of each filter pipeline are what HDF5's filters would decode (shuffle by hand, zlib inflate)."""
    from unmix.io._chunked_writer import ChunkTarget

    rng = np.random.default_rng(2)
    chunk = rng.random((1, 64, 48)).astype(np.float32)
    chunk[0, :10] = np.nan
    for pipeline, decode in [((2, 1), zlib.decompress), ((1,), zlib.decompress), ((2,), bytes), ((), bytes)]:
        target = ChunkTarget("unused.nc", "v", chunk.shape, chunk.shape, np.dtype("f4"), np.float32(np.nan), pipeline,
                             1)
        expected = _shuffled(chunk) if 2 in pipeline else chunk.tobytes()
        assert decode(target.encode_chunk(chunk)) == expected
    strided = np.asfortranarray(rng.random((40, 30)).astype(np.float32))  # not C-contiguous: read in C order
    target = ChunkTarget("unused.nc", "v", strided.shape, strided.shape, np.dtype("f4"), 0, (2, 1), 1)
    assert zlib.decompress(target.encode_chunk(strided)) == _shuffled(strided)


@pytest.mark.parametrize("complevel", [1, 2, 3])
def test_written_product_reads_back_bit_for_bit(tmp_path, complevel):
    """Fractions with runs, exact 0/1 and NaN through the NetCDF writer, read by netCDF4 and h5py (HDF5's
    own shuffle + inflate filters)."""
    import dask.array as da
    import h5py
    import netCDF4
    import xarray as xr

    from unmix.io.products import write_netcdf

    rng = np.random.default_rng(complevel)
    frac = np.stack([_fractions_like(rng, 160) for _ in range(2)])  # (time, endmember, y, x)
    frac[1, :, :40] = np.nan  # a no-data strip
    frac[0, 0, 50, 3] = np.nan * -1  # a negative NaN: bits must survive too
    georef = {"crs_wkt": 'LOCAL_CS["arbitrary"]', "transform": (30.0, 0.0, 0.0, 0.0, -30.0, 0.0)}
    ds = xr.Dataset(
        {"fractions": (("time", "endmember", "y", "x"), da.from_array(frac, chunks=(1, 3, 128, 96)),
                       {"units": "1", **georef})},
        coords={"time": np.array(["2020-01-01", "2021-01-01"], dtype="datetime64[ns]"),
                "endmember": ["a", "b", "c"], "y": np.arange(160.0), "x": np.arange(160.0)},
    )
    path = write_netcdf(ds, tmp_path / "p.nc", complevel=complevel)
    with h5py.File(path, "r") as f:
        back = f["fractions"][...]
    with netCDF4.Dataset(path) as nc:
        nc.set_auto_mask(False)
        back_nc = nc["fractions"][...]
    for values in (back, np.asarray(back_nc)):
        np.testing.assert_array_equal(values.view(np.uint32), frac.view(np.uint32))  # bit for bit
