"""Per-date read cost of a GeoTIFF stack: the stack reader's two paths against plain rasterio reads, same files.

Three ways of reading the same dates window by window (windows as ``open_stack`` chunks the files):

* ``plain``: the reference, rasterio/GDAL windowed reads of the stored values (one handle per date,
  no decoding): what any GDAL-based reader pays at least;
* ``direct``: the reader ``open_stack`` puts in its dask tasks for plain layouts: tifffile locates the
  blocks, ``os.pread`` reads them, imagecodecs inflates them and undoes the predictor, one compiled
  pass applies nodata, scale and offset into the band-last float32 window (identity checks included);
* ``gdal``: the same reader sent down its GDAL path (one rasterio open per window, read into a
  band-last buffer, the same compiled decode).

Each date is read whole in this thread, so CPU seconds are the cost of reading (GDAL may use no
extra threads here). The two reader paths are compared bit for bit on the first date. Prints wall
and CPU seconds per date and the ratios to ``plain``, then the dask graph ``open_stack`` builds,
computed on the threaded scheduler with ``--threads`` threads.

``--compare-with TREE`` also runs ``TREE/benchmarks/bench_read.py`` (another checkout of unmix,
for example an older commit unpacked with ``git archive``) in a separate process with
``PYTHONPATH=TREE`` on the same stack, and prints its output after this one's.

Usage::

    python benchmarks/bench_read.py                 # the 2000 x 2000 px stack of bench_pipeline.py
    python benchmarks/bench_read.py --size 1000 --dates 6 --repeats 3

The stack lives in ``benchmarks/_data/stack_<size>px_<n>d_t<tile>/``; a missing one is generated
(``--size``/``--dates``/``--tile``) with ``bench_pipeline.make_stack``.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent


def find_or_make_stack(data: Path, size: int, n_dates: int, tile: int) -> list[Path]:
    folder = data / f"stack_{size}px_{n_dates}d_t{tile}"
    if folder.is_dir() and len(list(folder.glob("*.tif"))) >= n_dates:
        return sorted(folder.glob("*.tif"))
    sys.path.insert(0, str(HERE))
    from bench_pipeline import make_stack

    print(f"generating {folder} ...", flush=True)
    return make_stack(folder, size, n_dates, tile)


def readers_for(files: list[Path], chunks: int | None) -> tuple[list, list, list[tuple]]:
    """Direct and GDAL readers of every date, and the windows of one date, as open_stack makes them."""
    import dataclasses

    from unmix.io.stack import open_stack
    from unmix.io.stack.geotiff import _DateReader

    cube = open_stack(files, scale=1e-4, chunks=chunks)
    direct: dict[str, _DateReader] = {}
    windows = set()
    for task in dict(cube.data.__dask_graph__()).values():
        args = task if isinstance(task, tuple) else (getattr(task, "func", None), *getattr(task, "args", ()))
        if len(args) == 3 and isinstance(args[1], _DateReader):
            direct[args[1].path] = args[1]
            windows.add(tuple(int(v) for v in args[2]))
    ordered = [direct[str(f)] for f in files]
    if any(r.tiles is None for r in ordered):
        print("note: some files are not a layout the direct path reads; they read through GDAL in both runs")
    gdal = [dataclasses.replace(r, tiles=None) for r in ordered]
    return ordered, gdal, sorted(windows)


def time_reads(readers: list, windows: list[tuple], repeats: int) -> tuple[float, float]:
    """Best-of-``repeats`` wall and CPU seconds per date."""
    best_wall = best_cpu = np.inf
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        for reader in readers:
            for window in windows:
                reader(window)
        best_wall = min(best_wall, (time.perf_counter() - w0) / len(readers))
        best_cpu = min(best_cpu, (time.process_time() - c0) / len(readers))
    return best_wall, best_cpu


def time_plain(files: list[Path], windows: list[tuple], band_indexes: tuple, repeats: int) -> tuple[float, float]:
    """Best-of-``repeats`` wall and CPU seconds per date of rasterio windowed reads (the reference)."""
    import rasterio
    from rasterio.windows import Window

    best_wall = best_cpu = np.inf
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        for path in files:
            with rasterio.open(path) as src:
                for row0, row1, col0, col1 in windows:
                    src.read(list(band_indexes), window=Window(col0, row0, col1 - col0, row1 - row0))
        best_wall = min(best_wall, (time.perf_counter() - w0) / len(files))
        best_cpu = min(best_cpu, (time.process_time() - c0) / len(files))
    return best_wall, best_cpu


def time_graph(readers: list, n_bands: int, chunks: tuple, threads: int, repeats: int) -> tuple[float, float]:
    """Best-of-``repeats`` wall and CPU seconds per date of computing the read graph with dask threads."""
    import dask

    from unmix.io.stack.chunks import _dask_from_readers

    best_wall = best_cpu = np.inf
    for _ in range(repeats):
        arr = _dask_from_readers(readers, n_bands, *chunks)
        w0, c0 = time.perf_counter(), time.process_time()
        # reduce per chunk so the cube is never held whole
        dask.compute(arr.sum(axis=(1, 2, 3)), scheduler="threads", num_workers=threads)
        best_wall = min(best_wall, (time.perf_counter() - w0) / len(readers))
        best_cpu = min(best_cpu, (time.process_time() - c0) / len(readers))
    return best_wall, best_cpu


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--size", type=int, default=2000, help="image edge [pixels] of the stack")
    parser.add_argument("--dates", type=int, default=40, help="dates in the stack folder (its name)")
    parser.add_argument("--tile", type=int, default=512, help="GeoTIFF tile edge [pixels]")
    parser.add_argument("--read-dates", type=int, default=10, help="dates read per run")
    parser.add_argument("--repeats", type=int, default=3, help="runs per path; the best is kept")
    parser.add_argument("--threads", type=int, default=2, help="dask threads for the graph run")
    parser.add_argument("--chunks", type=int, default=None, help="window edge [pixels] (default: open_stack's)")
    parser.add_argument("--data", type=Path, default=HERE / "_data", help="where generated stacks are kept")
    parser.add_argument("--compare-with", type=Path, default=None, metavar="TREE",
                        help="another unmix checkout whose bench_read.py runs on the same stack afterwards")
    args = parser.parse_args(argv)

    files = find_or_make_stack(args.data, args.size, args.dates, args.tile)[: args.read_dates]
    direct, gdal, windows = readers_for(files, args.chunks)
    a = np.concatenate([direct[0](w).ravel() for w in windows])
    b = np.concatenate([gdal[0](w).ravel() for w in windows])
    same = np.array_equal(a.view(np.uint32), b.view(np.uint32))
    layout = direct[0].tiles
    if layout is not None:
        print(f"stack: {len(files)} dates of {args.size} x {args.size} px, {len(direct[0].band_indexes)} bands, "
              f"{layout.dtype}, blocks {layout.block_h} x {layout.block_w}, "
              f"{'band' if layout.planar else 'pixel'}-interleaved, compression {layout.compression}, "
              f"predictor {layout.predictor}; {len(windows)} windows per date")
    print(f"direct and GDAL paths bit-identical on the first date: {same}")
    bands = direct[0].band_indexes
    time_reads(direct[:1], windows, 1)  # compile / warm the file cache
    time_reads(gdal[:1], windows, 1)
    rows = [("plain", *time_plain(files, windows, bands, args.repeats)),
            ("direct", *time_reads(direct, windows, args.repeats)),
            ("gdal", *time_reads(gdal, windows, args.repeats))]
    _print_rows("one thread, window after window", rows)
    ys = sorted({(w[0], w[1]) for w in windows})
    xs = sorted({(w[2], w[3]) for w in windows})
    chunks = (tuple(b - a for a, b in ys), tuple(b - a for a, b in xs))
    n_bands = len(bands)
    rows = [("direct", *time_graph(direct, n_bands, chunks, args.threads, args.repeats)),
            ("gdal", *time_graph(gdal, n_bands, chunks, args.threads, args.repeats))]
    _print_rows(f"dask graph, {args.threads} threads", rows)
    if args.compare_with is not None:
        _run_other_tree(args, argv)


def _print_rows(title: str, rows: list[tuple[str, float, float]]) -> None:
    ref_cpu = rows[0][2]
    print(f"{title}:")
    print(f"{'path':<8}{'wall s/date':>14}{'CPU s/date':>14}{'CPU / ' + rows[0][0]:>16}")
    for name, wall, cpu in rows:
        print(f"{name:<8}{wall:>14.3f}{cpu:>14.3f}{cpu / ref_cpu:>16.2f}")


def _run_other_tree(args: argparse.Namespace, argv: list[str] | None) -> None:
    """Run another checkout's bench_read.py on the same stack in its own process."""
    import os
    import subprocess

    tree = args.compare_with.resolve()
    forwarded = list(sys.argv[1:] if argv is None else argv)
    if "--compare-with" in forwarded:
        k = forwarded.index("--compare-with")
        del forwarded[k: k + 2]
    forwarded = [a for a in forwarded if not a.startswith("--compare-with=")]
    if "--data" not in forwarded:
        forwarded += ["--data", str(args.data.resolve())]
    env = dict(os.environ, PYTHONPATH=str(tree))
    print(f"\n--- {tree}/benchmarks/bench_read.py, same stack, separate process ---", flush=True)
    subprocess.run([sys.executable, str(tree / "benchmarks" / "bench_read.py"), *forwarded], env=env, check=False)


if __name__ == "__main__":
    main()
