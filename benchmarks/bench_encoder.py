"""Speed and size of the NetCDF chunk encoder and of the whole compressed NetCDF write.

Part 1, one chunk at a time. Generates one date of a product like the ones ``unmix fractions``
writes and cuts it into HDF5 chunks the way the writer does (views into the dask block): fraction
chunks (1 x 1 x 512 x 512 float32: smooth fields plus noise, clipped to [0, 1] and renormalised the
way a fully constrained solution is, so some values are exactly 0 or 1, with NaN where there is no
data) and rmse chunks (1 x 512 x 512 float32, small positive values, the same NaN). For each kind it
times, in this process and one thread,

* ours: :meth:`unmix.io._chunked_writer.ChunkTarget.encode_chunk` with HDF5's shuffle + deflate
  pipeline (numpy byte shuffle + ISA-L at levels 1-3, CPython's zlib at 4-9: everything the writer
  does per chunk before storing it), at each of ``--levels``;
* the reference: the same byte shuffle followed by CPython's ``zlib.compress`` at level 1, which is
  what HDF5's own shuffle + deflate filters do at the product's default level;

and prints MB/s of float32 input (CPU time of the thread, best of ``--repeat`` passes), the size
ratio (compressed / raw) and the speed ratio. Every stream of ours is checked with ``zlib.decompress``.

Part 2, the whole write. A lazy (time, endmember, y, x) float32 cube (dask, one block per date and
512 x 512 pixels, the values of part 1 repeated over dates) is written at level 1 with 2 dask threads

* by :func:`unmix.io.products.write_netcdf` (dask tasks compress, HDF5 stores the chunks), and
* by xarray's own ``to_netcdf`` with the same chunks and ``zlib`` + ``shuffle`` (HDF5 compresses);

both files are read back and compared, and the wall-clock seconds (best of ``--repeat``) and their
ratio are printed.

Run:  python benchmarks/bench_encoder.py [--side 1024] [--dates 8] [--repeat 3] [--levels 1,2,3,6]
"""

from __future__ import annotations

import argparse
import tempfile
import time
import zlib
from pathlib import Path

import numpy as np
from scipy import ndimage

from unmix.io import _chunked_writer
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


def rmse_like(rng, side=2 * SIDE):
    """(side, side) float32 model error [reflectance], NaN where no data."""
    base = 0.01 + 0.02 * np.abs(ndimage.gaussian_filter(rng.standard_normal((side, side)), 20)) * 10
    rmse = (base * rng.gamma(4, 0.25, (side, side))).astype(np.float32)
    rmse[_no_data(rng, (side, side))] = np.nan
    return rmse


def _chunks(block):
    """(..., y, x) block cut into (1, ..., 512, 512) views, as the writer cuts a dask block."""
    chunks = []
    for lead in np.ndindex(*block.shape[:-2]):
        for y in range(0, block.shape[-2], SIDE):
            for x in range(0, block.shape[-1], SIDE):
                index = tuple(slice(i, i + 1) for i in lead) + (slice(y, y + SIDE), slice(x, x + SIDE))
                chunks.append(block[(None,) + index] if not lead else block[index][None])
    return chunks


def _shuffled(chunk):
    """HDF5's shuffle filter (numpy byte transpose)."""
    return np.ascontiguousarray(np.ascontiguousarray(chunk).view(np.uint8).reshape(-1, chunk.itemsize).T).tobytes()


def reference(chunk):
    """HDF5's shuffle filter + CPython's zlib at level 1."""
    return zlib.compress(_shuffled(chunk), 1)


def _rate(fn, chunks, repeat):
    """MB/s of float32 input, from the CPU time of this thread (steadier than wall time on a shared
    machine; ISA-L and zlib both run in the calling thread), best of ``repeat``."""
    fn(chunks[0])  # warm-up
    best = np.inf
    for _ in range(repeat):
        t0 = time.thread_time()
        for c in chunks:
            fn(c)
        best = min(best, time.thread_time() - t0)
    return sum(c.nbytes for c in chunks) / best / 1e6


def bench_chunks(fractions, rmse, levels, repeat):
    print(f"part 1: {len(fractions)} fraction and {len(rmse)} rmse chunks of 512 x 512 float32, best of {repeat}, "
          "one thread; reference: shuffle + CPython zlib level 1")
    print(f"{'chunk':>10} {'level':>5} {'ours MB/s':>10} {'ratio':>7} {'zlib-1 MB/s':>12} {'ratio':>7} "
          f"{'speed x':>8} {'size x':>7}")
    for kind, chunks in (("fractions", fractions), ("rmse", rmse)):
        raw = sum(c.nbytes for c in chunks)
        ref_size = sum(len(reference(c)) for c in chunks)
        ref = _rate(reference, chunks, repeat)
        for level in levels:
            target = ChunkTarget("unused.nc", kind, chunks[0].shape, chunks[0].shape, np.dtype("f4"),
                                 np.float32(np.nan), (2, 1), level)
            ours_size = 0
            for c in chunks:
                stream = target.encode_chunk(c)
                assert zlib.decompress(stream) == _shuffled(c), "not a zlib stream of the shuffled bytes"
                ours_size += len(stream)
            ours = _rate(target.encode_chunk, chunks, repeat)
            print(f"{kind:>10} {level:5d} {ours:10.0f} {ours_size / raw:7.3f} {ref:12.0f} {ref_size / raw:7.3f} "
                  f"{ours / ref:8.1f} {ours_size / ref_size:7.3f}")


def bench_write(frac, n_dates, repeat, folder):
    import dask
    import dask.array as da
    import netCDF4
    import xarray as xr

    from unmix.io.products import write_netcdf

    cube = np.stack([np.roll(frac, 37 * t, axis=-1) for t in range(n_dates)])  # (time, endmember, y, x)
    side = cube.shape[-1]
    data = da.from_array(cube, chunks=(1, cube.shape[1], SIDE, SIDE))
    ds = xr.Dataset(
        {"fractions": (("time", "endmember", "y", "x"), data, {"units": "1"})},
        coords={"time": (np.datetime64("2020-01-01") + 16 * np.arange(n_dates)).astype("datetime64[ns]"),
                "endmember": [f"e{i}" for i in range(cube.shape[1])],
                "y": 30.0 * np.arange(side)[::-1], "x": 30.0 * np.arange(side)},
    )
    encoding = {"fractions": {"dtype": "float32", "_FillValue": np.float32(np.nan), "zlib": True, "complevel": 1,
                              "shuffle": True, "chunksizes": (1, 1, SIDE, SIDE)}}

    def ours(path):
        write_netcdf(ds, path, complevel=1)

    def xarray_own(path):
        ds.to_netcdf(path, engine="netcdf4", format="NETCDF4", encoding=encoding)

    times = {"write_netcdf": np.inf, "xarray to_netcdf": np.inf}
    sizes = {}
    with dask.config.set(scheduler="threads", num_workers=2):
        for i in range(repeat):
            for name, fn in (("write_netcdf", ours), ("xarray to_netcdf", xarray_own)):
                path = Path(folder) / f"{name.split()[0]}_{i}.nc"
                t0 = time.perf_counter()
                fn(path)
                times[name] = min(times[name], time.perf_counter() - t0)
                sizes[name] = path.stat().st_size
                with netCDF4.Dataset(path) as nc:
                    nc.set_auto_mask(False)
                    back = nc["fractions"][...]
                np.testing.assert_array_equal(back, cube)
                path.unlink()
    mb = cube.nbytes / 1e6
    print(f"\npart 2: write a lazy {cube.shape} float32 cube ({mb:.0f} MB), level 1, 2 dask threads, best of {repeat}")
    for name in times:
        print(f"{name:>18}: {times[name]:6.2f} s  {mb / times[name]:6.0f} MB/s  size {sizes[name] / cube.nbytes:.3f}")
    print(f"{'speed x':>18}: {times['xarray to_netcdf'] / times['write_netcdf']:6.1f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--side", type=int, default=2 * SIDE, help="image side [px], a multiple of 512")
    parser.add_argument("--dates", type=int, default=8, help="dates of the cube written in part 2")
    parser.add_argument("--repeat", type=int, default=3, help="timed passes (best is kept)")
    parser.add_argument("--levels", default="1,2,3,6", help="comma-separated NetCDF deflate levels of part 1")
    args = parser.parse_args()
    print(f"encoder: {_chunked_writer.__file__}")
    rng = np.random.default_rng(0)
    frac = fcls_like_fractions(rng, side=args.side)
    rmse = rmse_like(rng, side=args.side)
    bench_chunks(_chunks(frac), _chunks(rmse), [int(v) for v in args.levels.split(",")], args.repeat)
    with tempfile.TemporaryDirectory() as folder:
        bench_write(frac, args.dates, args.repeat, folder)


if __name__ == "__main__":
    main()
