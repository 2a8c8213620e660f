"""Per-date read cost of a GeoTIFF stack: the direct block reader against the GDAL path, same files.

Both paths are the reader that ``open_stack`` puts in its dask tasks (one call per date and
window, windows as ``open_stack`` chunks the files): the direct path reads the tiles with
``os.pread``, inflates them with libdeflate and decodes them in one compiled pass; the GDAL path
reads the window with rasterio into a band-last buffer and decodes it. Each date is read whole,
one window after another in this thread, so CPU seconds are the cost of reading (GDAL may use
no extra threads here). The two results are compared bit for bit on the first date.

Prints, per date: wall and CPU seconds of each path and their ratio (GDAL / direct), first read
window after window in one thread, then as a dask graph (the graph ``open_stack`` builds) computed
on the threaded scheduler with ``--threads`` threads.

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
        print("note: some files are not a layout the direct reader handles; they read through GDAL in both runs")
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
    print(f"bit-identical on the first date: {same}")
    time_reads(direct[:1], windows, 1)  # compile / warm the file cache
    time_reads(gdal[:1], windows, 1)
    gw, gc = time_reads(gdal, windows, args.repeats)
    dw, dc = time_reads(direct, windows, args.repeats)
    print(f"{'path':<8}{'wall s/date':>14}{'CPU s/date':>14}")
    print(f"{'GDAL':<8}{gw:>14.3f}{gc:>14.3f}")
    print(f"{'direct':<8}{dw:>14.3f}{dc:>14.3f}")
    print(f"ratio GDAL / direct: wall {gw / dw:.2f}x, CPU {gc / dc:.2f}x")
    ys = sorted({(w[0], w[1]) for w in windows})
    xs = sorted({(w[2], w[3]) for w in windows})
    chunks = (tuple(b - a for a, b in ys), tuple(b - a for a, b in xs))
    n_bands = len(direct[0].band_indexes)
    tgw, tgc = time_graph(gdal, n_bands, chunks, args.threads, args.repeats)
    tdw, tdc = time_graph(direct, n_bands, chunks, args.threads, args.repeats)
    print(f"dask graph, {args.threads} threads:")
    print(f"{'GDAL':<8}{tgw:>14.3f}{tgc:>14.3f}")
    print(f"{'direct':<8}{tdw:>14.3f}{tdc:>14.3f}")
    print(f"ratio GDAL / direct: wall {tgw / tdw:.2f}x, CPU {tgc / tdc:.2f}x")


if __name__ == "__main__":
    main()
