"""End-to-end speed and memory of ``unmix fractions`` against the bare kernel on the same data.

Generates an int16, tiled, deflate-compressed GeoTIFF stack (reflectance x 10 000, nodata -9999)
mixed from three endmembers, then

1. runs ``unmix fractions`` end to end in a subprocess (read -> unmix -> CF-NetCDF), polling the
   resident memory of the subprocess and its children with psutil;
2. runs :func:`unmix.solvers.estimate_fractions` alone, in this process, on in-memory float32 arrays
   of the same values (a few dates of the same stack, band last), right before and right after each
   end-to-end run, and compares the run with the mean of the two;

and prints pixel-dates per second, their ratio, and peak memory for a short and the full stack.

Targets (2 cores): end to end >= 25 % of the kernel-only rate; peak memory < 3 GB and within 1.3x
between the short and the long stack.

Usage::

    python benchmarks/bench_pipeline.py                  # 1000 x 1000 px, 6 bands, 10 and 40 dates
    python benchmarks/bench_pipeline.py --size 2000      # the full-size case
    python benchmarks/bench_pipeline.py --size 300 --dates 4 12   # a quick check

Generated stacks are kept in ``benchmarks/_data/`` (git-ignored) and reused.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
BANDS = ("B2", "B3", "B4", "B5", "B6", "B7")
ENDMEMBERS = {
    "green_vegetation": (0.04, 0.08, 0.05, 0.45, 0.25, 0.12),
    "bright_soil": (0.12, 0.16, 0.22, 0.28, 0.38, 0.34),
    "shade": (0.01, 0.01, 0.01, 0.01, 0.01, 0.01),
}
CENTRES = (482.5, 562.5, 655.0, 865.0, 1610.0, 2200.0)


def make_stack(folder: Path, size: int, n_dates: int, tile: int = 512, seed: int = 0) -> list[Path]:
    """Write ``n_dates`` int16 GeoTIFFs of size x size x 6 bands into ``folder`` (reused if present)."""
    import rasterio
    from affine import Affine

    folder.mkdir(parents=True, exist_ok=True)
    M = np.array(list(ENDMEMBERS.values()), dtype=np.float32)
    transform = Affine(30.0, 0.0, 400000.0, 0.0, -30.0, 3500000.0)
    files = []
    start = np.datetime64("2015-01-10")
    for t in range(n_dates):
        date = start + np.timedelta64(int(t * 365.25 / 4), "D")
        path = folder / f"scene_{date}.tif"
        files.append(path)
        if path.exists():
            continue
        rng = np.random.default_rng(seed + t)
        tmp = path.with_suffix(".partial")
        with rasterio.open(tmp, "w", driver="GTiff", width=size, height=size, count=len(BANDS), dtype="int16",
                           crs="EPSG:32612", transform=transform, nodata=-9999, tiled=True, blockxsize=tile,
                           blockysize=tile, compress="deflate", predictor=2) as dst:
            for row in range(0, size, tile):
                h = min(tile, size - row)
                frac = rng.dirichlet(np.ones(len(M)), size=(h, size)).astype(np.float32)
                refl = frac @ M + rng.normal(0, 0.003, size=(h, size, len(BANDS))).astype(np.float32)
                block = np.clip(np.round(refl * 10000), -2000, 12000).astype(np.int16)
                block[rng.random((h, size)) < 0.01] = -9999  # 1 % no data
                dst.write(np.moveaxis(block, -1, 0), window=rasterio.windows.Window(0, row, size, h))
        os.replace(tmp, path)
    return files


def write_library(path: Path) -> Path:
    lines = ["wavelength_nm,band," + ",".join(ENDMEMBERS)]
    for b, (band, centre) in enumerate(zip(BANDS, CENTRES)):
        lines.append(f"{centre},{band}," + ",".join(str(v[b]) for v in ENDMEMBERS.values()))
    path.write_text("\n".join(lines) + "\n")
    return path


def run_measured(cmd: list[str], *, env: dict | None = None, cwd: Path | None = None) -> tuple[float, float, float, str]:
    """Run ``cmd`` in a subprocess, polling the resident memory of it and its children with psutil.

    Returns (wall seconds, CPU seconds of the process tree, peak RSS of the tree [bytes], stdout).
    """
    import resource

    import psutil

    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=cwd)
    ps = psutil.Process(proc.pid)
    peak = 0
    while proc.poll() is None:
        try:
            procs = [ps, *ps.children(recursive=True)]
            peak = max(peak, sum(p.memory_info().rss for p in procs if p.is_running()))
        except psutil.Error:
            pass
        time.sleep(0.05)
    seconds = time.perf_counter() - t0
    stdout, stderr = proc.communicate()
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(cmd[:4])} ... failed ({proc.returncode}):\n{stderr}")
    return seconds, cpu, peak, stdout.strip()


def run_end_to_end(folder: Path, library: Path, out: Path, extra: list[str]) -> tuple[float, float, float, str]:
    """Run the command in a subprocess.

    Returns (wall seconds, CPU seconds of the process tree, peak RSS of the tree [bytes], summary).
    """
    cmd = [sys.executable, "-m", "unmix.cli.main", "fractions", str(folder), "--library", str(library),
           "--sensor", "landsat-8-oli", "--band-names", ",".join(BANDS), "--scale", "0.0001", "--out", str(out),
           "--overwrite", *extra]
    return run_measured(cmd)


def startup_seconds(repeats: int = 2) -> float:
    """Wall seconds of starting the command's process and importing it (best of ``repeats``)."""
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", "import unmix.cli.main"], check=True)
        best = min(best, time.perf_counter() - t0)
    return best


def load_kernel_data(files: list[Path], n_dates: int) -> np.ndarray:
    """The first ``n_dates`` dates as in-memory float32 reflectance (t, y, x, band), NaN = no data."""
    import rasterio

    arrays = []
    for f in files[:n_dates]:
        with rasterio.open(f) as src:
            raw = src.read()
        refl = raw.astype(np.float32) * np.float32(1e-4)
        refl[raw == -9999] = np.nan
        arrays.append(np.ascontiguousarray(np.moveaxis(refl, 0, -1)))
    return np.stack(arrays)


def kernel_only_rate(x: np.ndarray, repeats: int = 2) -> tuple[float, float]:
    """Pixel-dates per wall second and per CPU second of estimate_fractions on in-memory ``x`` (best of ``repeats``)."""
    from unmix.solvers import estimate_fractions

    M = np.array(list(ENDMEMBERS.values()), dtype=np.float64)
    estimate_fractions(x[:1, :64, :64], M)  # compile / warm up
    best, best_cpu = np.inf, np.inf
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        estimate_fractions(x, M)
        best = min(best, time.perf_counter() - t0)
        best_cpu = min(best_cpu, time.process_time() - c0)
    pixel_dates = int(np.prod(x.shape[:3]))
    return pixel_dates / best, pixel_dates / best_cpu


def _met(ok: bool) -> str:
    return "met" if ok else "NOT met"


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--size", type=int, default=1000, help="image edge [pixels] (full case: 2000)")
    parser.add_argument("--dates", type=int, nargs="+", default=[10, 40], help="stack lengths to run")
    parser.add_argument("--tile", type=int, default=512, help="GeoTIFF tile edge [pixels]")
    parser.add_argument("--kernel-dates", type=int, default=4, help="dates held in memory for the kernel-only run")
    parser.add_argument("--workers", type=int, default=None, help="also pass --workers N to the command")
    parser.add_argument("--chunk-size", type=int, default=None, help="pass --chunk-size N to the command")
    parser.add_argument("--compress-level", type=int, default=None,
                        help="pass --compress-level N to the command (0 = uncompressed NetCDF)")
    parser.add_argument("--data", type=Path, default=HERE / "_data", help="where generated stacks are kept")
    args = parser.parse_args(argv)

    extra = []
    if args.workers:
        extra += ["--workers", str(args.workers)]
    if args.chunk_size:
        extra += ["--chunk-size", str(args.chunk_size)]
    if args.compress_level is not None:
        extra += ["--compress-level", str(args.compress_level)]
    n_max = max(args.dates)
    folder = args.data / f"stack_{args.size}px_{n_max}d_t{args.tile}"
    t0 = time.perf_counter()
    files = make_stack(folder, args.size, n_max, args.tile)
    print(f"stack: {folder} ({len(files)} dates of {args.size} x {args.size} px x {len(BANDS)} bands int16; "
          f"prepared in {time.perf_counter() - t0:.0f} s)")
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} at start (shared machine)")

    x = load_kernel_data(files, min(args.kernel_dates, n_max))
    print(f"kernel only: estimate_fractions on {int(np.prod(x.shape[:3])):,} in-memory pixel-dates, measured right "
          "before and right after each end-to-end run (this virtual machine's speed drifts by up to 2x within "
          "minutes, so each run is compared with the kernel's rate at that time)")

    startup = startup_seconds()
    print(f"start-up: python + import of the command: {startup:.1f} s (included in the e2e wall time)")

    rows = []
    with tempfile.TemporaryDirectory(prefix="unmix-bench-") as tmp:
        library = write_library(Path(tmp) / "library.csv")
        for n in sorted(args.dates):
            sub = Path(tmp) / f"dates_{n}"
            sub.mkdir()
            for f in files[:n]:
                os.symlink(f, sub / f.name)
            before = kernel_only_rate(x)
            seconds, cpu, peak, summary = run_end_to_end(sub, library, Path(tmp) / f"out_{n}", extra)
            after = kernel_only_rate(x)
            k_rate, k_cpu_rate = (before[0] + after[0]) / 2, (before[1] + after[1]) / 2
            px = args.size * args.size * n
            rows.append((n, seconds, px / seconds, px / seconds / k_rate, px / cpu / k_cpu_rate, peak))
            print(f"  {summary}")
            print(f"  kernel only: {before[0]:,.0f} before, {after[0]:,.0f} after pixel-dates/s (wall); "
                  f"{before[1]:,.0f} / {after[1]:,.0f} per CPU second")
    print()
    print("e2e = `unmix fractions` subprocess (start-up, read, unmix, write NetCDF); kernel = estimate_fractions")
    print(f"{'dates':>5} {'wall s':>8} {'pixel-dates/s':>14} {'e2e/kernel':>10} {'e2e/kernel':>10} {'e2e/kernel':>12} "
          f"{'peak RSS':>10}")
    print(f"{'':>5} {'':>8} {'(wall)':>14} {'(wall)':>10} {'(CPU)':>10} {'(no start-up)':>12} {'(tree)':>10}")
    for n, seconds, rate, ratio, cpu_ratio, peak in rows:
        warm = ratio * seconds / max(seconds - startup, 1e-9)
        print(f"{n:>5} {seconds:>8.1f} {rate:>14,.0f} {ratio:>10.2f} {cpu_ratio:>10.2f} {warm:>12.2f} "
              f"{peak / 2**30:>7.2f} GB")
    print()
    print("targets (2 cores):")
    for n, seconds, rate, ratio, cpu_ratio, peak in rows:
        print(f"  {n:>3} dates: e2e/kernel (wall) {ratio:.2f} >= 0.25: {_met(ratio >= 0.25)}; "
              f"peak RSS {peak / 2**30:.2f} GB < 3 GB: {_met(peak < 3 * 2**30)}")
    if len(rows) > 1:
        mem_ratio = rows[-1][5] / rows[0][5]
        print(f"  peak memory {rows[-1][0]} vs {rows[0][0]} dates: {mem_ratio:.2f} <= 1.3: {_met(mem_ratio <= 1.3)}")
    print("(CPU ratio = kernel CPU-seconds / e2e CPU-seconds per pixel-date: less sensitive to other load; "
          "no start-up = wall ratio with the start-up time above taken out, for information)")
    level = "default (1)" if args.compress_level is None else str(args.compress_level)
    print(f"NetCDF compression level: {level}; load average at end {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
