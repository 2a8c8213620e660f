"""Benchmark of ``unmix trends``: series per second and peak memory at two chunk sizes.

Generates a fractions product (time, endmember, y, x) as chunked NetCDF -- once per chunk size, since
the command computes on the file's own chunks -- then runs ``unmix trends`` on it in a fresh Python
process per run and reads that process's peak resident memory (``ru_maxrss``). If memory is bounded by
the chunk and not by the cube, the peak stays far below the cube size and moves with the chunk size.

In the same run, a reference implementation (a Python loop over series calling pymannkendall's
Hamed-Rao test, ``scipy.stats.theilslopes`` and a numpy Pettitt statistic) labels a random sample of
the same series, and the ratio of rates is printed.

Usage::

    python benchmarks/bench_trends_cube.py                      # 400 x 400 pixels, 4 endmembers, 40 dates
    python benchmarks/bench_trends_cube.py --size 2000 --chunks 256,512

The generated files live in ``benchmarks/_data/`` (ignored by git); ``--keep`` keeps them.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent


def make_product(path: Path, size: int, n_end: int, n_dates: int, chunk: int) -> float:
    """Write a synthetic fractions product lazily (dask); return the seconds it took."""
    import dask.array as da
    import pandas as pd
    import xarray as xr

    from unmix.io.products import write_netcdf

    t0 = time.perf_counter()
    time_ = pd.date_range("2014-01-01", periods=n_dates, freq="QS")
    years = (np.arange(n_dates) / 4.0).astype(np.float32)

    def block(block_info=None):
        info = block_info[None]
        (t_lo, t_hi), (e_lo, e_hi), (y_lo, y_hi), (x_lo, x_hi) = info["array-location"]
        rng = np.random.default_rng([y_lo, x_lo, e_lo, t_lo])
        shape = info["chunk-shape"]
        out = 0.3 + rng.normal(0, 0.02, shape).astype(np.float32)
        yy = np.arange(y_lo, y_hi)[None, None, :, None]
        xx = np.arange(x_lo, x_hi)[None, None, None, :]
        tt = years[t_lo:t_hi][:, None, None, None]
        decline = (yy < size // 3) & (xx % 2 == 0)  # a third of the rows: gradual decline in every other column
        step = (yy >= 2 * size // 3) & (xx < size // 2)  # a step up half way
        out = out - np.where(decline, 0.02 * tt, 0).astype(np.float32)
        out = out + np.where(step & (np.arange(t_lo, t_hi)[:, None, None, None] >= n_dates // 2), 0.15, 0).astype(np.float32)
        return out

    shape = (n_dates, n_end, size, size)
    chunks = (1, 1, chunk, chunk)
    data = da.map_blocks(block, dtype=np.float32, chunks=tuple(
        tuple([c] * (s // c) + ([s % c] if s % c else [])) for s, c in zip(shape, chunks)))
    ds = xr.Dataset(
        {"fractions": (("time", "endmember", "y", "x"), data, {"units": "1"})},
        coords={
            "time": time_,
            "endmember": [f"em{i}" for i in range(n_end)],
            "y": 4100000.0 - 30.0 * (np.arange(size) + 0.5),
            "x": 500000.0 + 30.0 * (np.arange(size) + 0.5),
        },
    )
    write_netcdf(ds, path, overwrite=True, scheduler="threads")
    return time.perf_counter() - t0


def run_one(product: Path, out: Path, extra: list[str]) -> None:
    """Child process: run the command, print its peak RSS as JSON on the last line."""
    from unmix.cli.main import main

    with open("/proc/self/statm") as fh:  # resident memory after the imports: the floor of every run
        base_mb = int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 2**20
    t0 = time.perf_counter()
    code = main(["trends", str(product), "--out", str(out), "--overwrite", *extra])
    seconds = time.perf_counter() - t0
    peak_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    print(json.dumps({"code": code, "seconds": seconds, "peak_mb": peak_kb / 1024.0, "base_mb": base_mb}))


def reference_rate(product: Path, n_sample: int, seed: int = 0) -> tuple[float, float, float]:
    """Python-loop reference on a sample of series; returns (series/s ref, series/s ours, agreement)."""
    import pymannkendall
    import scipy.stats
    import xarray as xr

    from unmix.dates import decimal_years as decimal_year
    from unmix.trajectory import effect_sizes, rank_tests

    with xr.open_dataset(product) as ds:
        rng = np.random.default_rng(seed)
        ny, nx = ds.sizes["y"], ds.sizes["x"]
        iy = rng.integers(0, ny, n_sample)
        ix = rng.integers(0, nx, n_sample)
        ie = rng.integers(0, ds.sizes["endmember"], n_sample)
        cube = ds["fractions"]
        series = np.stack([cube.isel(endmember=int(e), y=int(a), x=int(b)).values for e, a, b in zip(ie, iy, ix)])
        t = decimal_year(ds["time"].values)
    series = series.astype(np.float64)
    t0 = time.perf_counter()
    ref_p, ref_slope = [], []
    import warnings

    warnings.simplefilter("ignore", RuntimeWarning)  # pymannkendall's sqrt of a negative corrected variance
    for s in series:
        mk = pymannkendall.hamed_rao_modification_test(s)
        ts = scipy.stats.theilslopes(s, t)
        n = s.size
        r = scipy.stats.rankdata(s)
        u = np.array([2 * r[: k + 1].sum() - (k + 1) * (n + 1) for k in range(n)])  # Pettitt U_t from ranks
        k_stat = np.abs(u).max()
        _ = min(1.0, 2 * np.exp(-6 * k_stat**2 / (n**3 + n**2)))
        ref_p.append(mk.p)
        ref_slope.append(ts.slope)
    ref_rate = n_sample / (time.perf_counter() - t0)
    rank_tests(series[:2], t)  # compile outside the timing
    effect_sizes(series[:2], t)
    t0 = time.perf_counter()
    rank_tests(series, t, correction="hamed-rao")
    ours_e = effect_sizes(series, t)
    ours_rate = n_sample / (time.perf_counter() - t0)
    agree = float(np.mean(np.isclose(ours_e.slope, ref_slope, rtol=1e-6, atol=1e-9)))
    return ref_rate, ours_rate, agree


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--size", type=int, default=400, help="pixels along y and x (default 400; the brief's full case is 2000)")
    ap.add_argument("--endmembers", type=int, default=4)
    ap.add_argument("--dates", type=int, default=40)
    ap.add_argument("--chunks", default="100,400", help="two (or more) spatial chunk sizes, comma-separated")
    ap.add_argument("--sample", type=int, default=300, help="series for the Python-loop reference")
    ap.add_argument("--workdir", type=Path, default=HERE / "_data" / "trends")
    ap.add_argument("--keep", action="store_true", help="keep the generated files")
    ap.add_argument("--run-one", nargs=2, metavar=("PRODUCT", "OUT"), help=argparse.SUPPRESS)
    ap.add_argument("extra", nargs="*", help="extra options passed to unmix trends (after --)")
    args = ap.parse_args()
    if args.run_one:
        run_one(Path(args.run_one[0]), Path(args.run_one[1]), args.extra)
        return 0

    args.workdir.mkdir(parents=True, exist_ok=True)
    n_series = args.size * args.size * args.endmembers
    cube_mb = n_series * args.dates * 4 / 2**20
    print(f"unmix trends benchmark: {args.size} x {args.size} pixels x {args.endmembers} endmembers x "
          f"{args.dates} dates = {n_series:,} series; cube {cube_mb:,.0f} MB as float32; "
          f"{os.cpu_count()} cores (shared machine: timings are noisy)")
    results = []
    for chunk in [int(c) for c in args.chunks.split(",")]:
        product = args.workdir / f"fractions_{args.size}_c{chunk}.nc"
        if not product.exists():
            secs = make_product(product, args.size, args.endmembers, args.dates, chunk)
            print(f"  generated {product.name} ({product.stat().st_size / 2**20:,.0f} MB on disk) in {secs:.0f} s")
        out = args.workdir / f"out_c{chunk}"
        proc = subprocess.run(
            [sys.executable, __file__, "--run-one", str(product), str(out), "--", *args.extra],
            capture_output=True, text=True,
        )
        if proc.returncode != 0:
            print(proc.stdout, proc.stderr)
            return 1
        stats = json.loads(proc.stdout.strip().splitlines()[-1])
        chunk_mb = chunk * chunk * args.dates * 4 / 2**20
        results.append((chunk, stats))
        print(f"  chunk {chunk:>4} x {chunk:<4} (x {args.dates} dates = {chunk_mb:6.1f} MB per chunk): "
              f"{stats['seconds']:7.1f} s, {n_series / stats['seconds']:>10,.0f} series/s, "
              f"peak RSS {stats['peak_mb']:6.0f} MB (after imports {stats['base_mb']:4.0f} MB; "
              f"peak - imports = {100 * (stats['peak_mb'] - stats['base_mb']) / cube_mb:5.1f} % of the cube)")
    product = args.workdir / f"fractions_{args.size}_c{int(args.chunks.split(',')[0])}.nc"
    ref_rate, ours_rate, agree = reference_rate(product, args.sample)
    print(f"  kernels on {args.sample} sampled series, one thread pool: ours {ours_rate:,.0f} series/s, "
          f"Python loop (pymannkendall Hamed-Rao + scipy theilslopes + Pettitt) {ref_rate:,.0f} series/s, "
          f"ratio {ours_rate / ref_rate:,.0f}x; Sen slopes agree on {100 * agree:.1f} % of series")
    if not args.keep:
        shutil.rmtree(args.workdir, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
