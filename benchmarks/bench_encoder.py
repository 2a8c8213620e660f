"""Speed and size of the NetCDF chunk encoder against CPython's zlib on the same chunks.

Generates one date of a product like the ones ``unmix fractions`` writes and cuts it into HDF5
chunks the way the writer does (views into the dask block): fraction chunks (1 x 1 x 512 x 512
float32: smooth fields plus noise, clipped to [0, 1] and renormalised the way a fully constrained
solution is, so some values are exactly 0 or 1, with NaN where there is no data) and rmse chunks
(1 x 512 x 512 float32, small positive values, the same NaN). For each kind it times

* ours: :meth:`unmix.io._chunked_writer.ChunkTarget.encode_chunk` with HDF5's shuffle + deflate
  pipeline (byte shuffle and zlib stream, everything the writer does per chunk before storing it);
* the reference: the same byte shuffle in numpy followed by ``zlib.compress(level=...)``, which is
  what HDF5's own shuffle + deflate filters do;

in this process, one thread, and prints MB/s of float32 input (CPU time of the thread, best of
``--repeat`` passes) and the size ratio (compressed / raw) of both, and their speed ratio. Every stream of ours is checked with ``zlib.decompress``.
If the ``deflate`` package (libdeflate) happens to be importable its level-matched compressor is
printed as a second, informative reference.

Run:  python benchmarks/bench_encoder.py [--side 1024] [--repeat 5] [--level 1]
"""

from __future__ import annotations

import argparse
import time
import zlib

import numpy as np
from scipy import ndimage

from unmix.io._chunked_writer import ChunkTarget

SIDE = 512


def _no_data(rng, shape):
    """A few blobs of no data (cloud, outside the scene), about 5-10 % of the chunk."""
    field = ndimage.gaussian_filter(rng.standard_normal(shape), 12)
    return field > np.quantile(field, 0.93)


def fcls_like_fractions(rng, n_endmembers=3, side=2 * SIDE):
    """(n_endmembers, side, side) float32 fractions in [0, 1] summing to one, NaN where no data."""
    logits = np.stack([ndimage.gaussian_filter(rng.standard_normal((side, side)), s) * 25
                       for s in rng.uniform(4, 30, n_endmembers)])
    frac = np.exp(logits - logits.max(axis=0))
    frac /= frac.sum(axis=0)
    frac += rng.normal(0, 0.04, frac.shape)  # sensor noise moves the solution, the simplex clips it
    frac = np.clip(frac, 0, None)
    frac /= frac.sum(axis=0)
    frac = frac.astype(np.float32)
    frac[frac < 0.01] = 0  # active non-negativity constraints: exact zeros
    one = frac.max(axis=0) > 0.99
    frac[:, one] = np.where(frac[:, one] == frac[:, one].max(axis=0), np.float32(1), np.float32(0))
    frac[:, _no_data(rng, (side, side))] = np.nan
    return frac


def _chunks(block):
    """(..., y, x) block cut into (1, ..., 512, 512) views, as the writer cuts a dask block."""
    chunks = []
    for lead in np.ndindex(*block.shape[:-2]):
        for y in range(0, block.shape[-2], SIDE):
            for x in range(0, block.shape[-1], SIDE):
                index = tuple(slice(i, i + 1) for i in lead) + (slice(y, y + SIDE), slice(x, x + SIDE))
                chunks.append(block[(None,) + index] if not lead else block[index][None])
    return chunks


def rmse_like(rng, side=2 * SIDE):
    """(side, side) float32 model error [reflectance], NaN where no data."""
    base = 0.01 + 0.02 * np.abs(ndimage.gaussian_filter(rng.standard_normal((side, side)), 20)) * 10
    rmse = (base * rng.gamma(4, 0.25, (side, side))).astype(np.float32)
    rmse[_no_data(rng, (side, side))] = np.nan
    return rmse


def reference(chunk, level):
    """HDF5's shuffle filter (numpy byte transpose) + zlib at ``level``."""
    as_bytes = chunk.view(np.uint8).reshape(chunk.shape + (chunk.itemsize,))
    return zlib.compress(np.ascontiguousarray(np.moveaxis(as_bytes, -1, 0)).tobytes(), level)


def _rate(fn, chunks, repeat):
    """MB/s of float32 input, from the CPU time of this thread (steadier than wall time on a shared
    machine; zlib and the compiled coder both run in the calling thread), best of ``repeat``."""
    fn(chunks[0])  # warm-up (numba compiles or loads its cache)
    best = np.inf
    for _ in range(repeat):
        t0 = time.thread_time()
        for c in chunks:
            fn(c)
        best = min(best, time.thread_time() - t0)
    return sum(c.nbytes for c in chunks) / best / 1e6


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--side", type=int, default=2 * SIDE, help="image side [px], a multiple of 512")
    parser.add_argument("--repeat", type=int, default=5, help="timed passes (best is kept)")
    parser.add_argument("--level", type=int, default=1, help="deflate level")
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    fractions = _chunks(fcls_like_fractions(rng, side=args.side))  # (1, 1, 512, 512) views of one date
    rmse = _chunks(rmse_like(rng, side=args.side))  # (1, 512, 512) views
    try:
        import deflate as libdeflate  # optional, informative only
    except ImportError:
        libdeflate = None

    print(f"level {args.level}, {len(fractions)} fraction and {len(rmse)} rmse chunks, best of {args.repeat}, "
          "one thread")
    print(f"{'chunk':>10} {'ours MB/s':>10} {'ratio':>7} {'zlib MB/s':>10} {'ratio':>7} {'speed x':>8}"
          + ("  libdeflate MB/s ratio" if libdeflate else ""))
    for kind, chunks in (("fractions", fractions), ("rmse", rmse)):
        target = ChunkTarget("unused.nc", kind, chunks[0].shape, chunks[0].shape, np.dtype("f4"), np.float32(np.nan),
                             (2, 1), args.level)
        raw = sum(c.nbytes for c in chunks)
        ours_size = 0
        for c in chunks:
            stream = target.encode_chunk(c)
            shuffled = np.ascontiguousarray(np.ascontiguousarray(c).view(np.uint8).reshape(-1, 4).T).tobytes()
            assert zlib.decompress(stream) == shuffled, "not a zlib stream of the shuffled bytes"
            ours_size += len(stream)
        ref_size = sum(len(reference(c, args.level)) for c in chunks)
        ours = _rate(target.encode_chunk, chunks, args.repeat)
        ref = _rate(lambda c: reference(c, args.level), chunks, args.repeat)
        line = (f"{kind:>10} {ours:10.0f} {ours_size / raw:7.3f} {ref:10.0f} {ref_size / raw:7.3f} "
                f"{ours / ref:8.1f}")
        if libdeflate:
            def other(c):
                as_bytes = c.view(np.uint8).reshape(c.shape + (4,))
                return libdeflate.zlib_compress(np.ascontiguousarray(np.moveaxis(as_bytes, -1, 0)).tobytes(),
                                                args.level)

            size = sum(len(other(c)) for c in chunks)
            line += f"  {_rate(other, chunks, args.repeat):15.0f} {size / raw:5.3f}"
        print(line)


if __name__ == "__main__":
    main()
