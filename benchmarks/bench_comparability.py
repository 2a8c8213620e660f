"""Cost of the comparability checks (co-registration + radiometry) as a share of unmixing the same stack.

On an int16 GeoTIFF stack of 6 bands (tiles of 512 px, reused when present), in one process:

1. ``measure_comparability`` with its defaults: one read of 4 blocks of 256 px (all bands; each block
   inside one tile), one task per date: gradient-field correlation over every band against the
   reference date, and the date's share of a fixed sample of 20 000 pixels of the blocks for IR-MAD +
   orthogonal regression; timed twice: with a given reference date, and as ``unmix fractions`` runs it by
   default, the reference chosen as the date with most valid pixels in the blocks (kept in memory while
   it is chosen, so they are read once);
2. ``unmix_cube`` of the same stack, computed to the end (all pixel-dates),

timed several times each (``--repeats``; the medians are compared, as a shared machine's timings vary
by about a tenth), and prints both times and their ratio, and the peak resident memory before and after measuring beside the
size of the stack (with a given reference, measuring holds the reference's blocks and the dates in
flight; choosing the reference keeps every date's blocks, up to ``BLOCK_MEMORY``, beyond which they are
read twice instead). Measuring opens the same files a second time in chunks of the block's edge, as
``unmix fractions`` does, so the blocks read only the tiles they lie in. Both are timed warm: the unmixing kernel is
compiled, and the tile decoder loaded, on a few pixels first (numba's first use in a process).

The dates are related, as in a real record (:func:`make_related_stack`): one landscape of smooth cover
fractions (texture a few to a few tens of pixels across) seen on every date, patches whose cover changes
and stays changed (about 0.7 % of the scene per date), a gain and offset per date and band, sensor
noise and 1 % missing pixels. So IR-MAD finds invariant pixels and settles as it does on real
data, and the registration measures a registered record (the shifts printed should be near 0). Unrelated
random dates would make IR-MAD run to its iteration limit on every date and say nothing about real
costs. Target (the issue's): measuring costs at most 15 % of unmixing.

Usage::

    python benchmarks/bench_comparability.py                       # 2000 x 2000 px, 40 dates
    python benchmarks/bench_comparability.py --size 500 --dates 4  # a quick check
    python benchmarks/bench_comparability.py --band B5             # correlate one band only
    python benchmarks/bench_comparability.py --data-dir /other/_data   # reuse stacks written elsewhere
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_pipeline import BANDS, ENDMEMBERS  # noqa: E402

#: Three more invented spectra (water, dry vegetation, bright sand) mixed into the stack beside the
#: unmixing endmembers, so the scene has as many spectral dimensions as bands.
MORE_MATERIALS = ((0.06, 0.05, 0.03, 0.01, 0.005, 0.003), (0.08, 0.11, 0.15, 0.25, 0.40, 0.30),
                  (0.20, 0.28, 0.36, 0.42, 0.50, 0.46))


def make_related_stack(folder: Path, size: int, n_dates: int, tile: int = 512, seed: int = 0) -> list[Path]:
    """Write ``n_dates`` related int16 GeoTIFFs (6 bands, reflectance x 10 000) into ``folder`` (reused).

    Cover fractions of the endmembers of ``bench_pipeline.ENDMEMBERS`` and :data:`MORE_MATERIALS` come
    from smoothed random fields (Gaussian smoothing of 3 and 20 px), plus a smooth texture of each band's
    own (0.02 x smoothed noise), shared by every date; each date replaces the cover of random discs
    (radius 5-40 px, about 0.7 % of the scene per date, cumulative: changed ground stays changed, about
    a quarter of the scene after 40 dates), has its
    own gain (0.95-1.05) and offset (+-0.005) per band, as atmosphere and sensor bring, and Gaussian noise
    (0.003) and 1 % missing pixels.
    """
    import rasterio
    from affine import Affine
    from scipy import ndimage

    folder.mkdir(parents=True, exist_ok=True)
    M = np.array(list(ENDMEMBERS.values()) + list(MORE_MATERIALS), dtype=np.float32)
    transform = Affine(30.0, 0.0, 400000.0, 0.0, -30.0, 3500000.0)
    start = np.datetime64("2015-01-10")
    files = [folder / f"scene_{start + np.timedelta64(int(t * 365.25 / 4), 'D')}.tif" for t in range(n_dates)]
    if all(f.exists() for f in files):
        return files
    rng = np.random.default_rng(seed)
    k = len(M)
    field = np.empty((k, size, size), dtype=np.float32)
    for e in range(k):
        field[e] = (ndimage.gaussian_filter(rng.standard_normal((size, size), dtype=np.float32), 3) * 6
                    + ndimage.gaussian_filter(rng.standard_normal((size, size), dtype=np.float32), 20) * 20)
    # each band's own lasting texture (mineralogy, moisture, litter): real surfaces fill every band's
    # dimension, mixtures of a few spectra alone leave IR-MAD canonical pairs of pure noise
    own = np.stack([ndimage.gaussian_filter(rng.standard_normal((size, size), dtype=np.float32), 3) * 0.02
                    for _ in BANDS])
    yy, xx = np.ogrid[:size, :size]
    for t, path in enumerate(files):
        n_discs = max(1, int(0.005 * size * size / (np.pi * 20 ** 2)))
        for _ in range(n_discs):  # cover change that stays: a new mixture inside a disc
            cy, cx, r = rng.uniform(0, size), rng.uniform(0, size), rng.uniform(5, 40)
            disc = (yy - cy) ** 2 + (xx - cx) ** 2 <= r * r
            field[:, disc] = rng.normal(0, 1.5, (k, 1)).astype(np.float32) + 0.3 * field[:, disc]
        gain = rng.uniform(0.95, 1.05, len(BANDS)).astype(np.float32)  # the date's atmosphere and sensor
        offset = rng.uniform(-0.005, 0.005, len(BANDS)).astype(np.float32)
        if path.exists():
            continue
        w = np.exp(field - field.max(axis=0))
        frac = w / w.sum(axis=0)
        refl = ((np.einsum("kyx,kb->byx", frac, M) + own) * gain[:, None, None] + offset[:, None, None]
                + rng.normal(0, 0.003, (len(BANDS), size, size)).astype(np.float32))
        data = np.clip(np.round(refl * 10000), -2000, 12000).astype(np.int16)
        data[:, rng.random((size, size)) < 0.01] = -9999  # 1 % no data
        tmp = path.with_suffix(".partial")
        with rasterio.open(tmp, "w", driver="GTiff", width=size, height=size, count=len(BANDS), dtype="int16",
                           crs="EPSG:32612", transform=transform, nodata=-9999, tiled=True, blockxsize=tile,
                           blockysize=tile, compress="deflate", predictor=2) as dst:
            dst.write(data)
        os.replace(tmp, path)
    return files


def _peak_rss_mb() -> float:
    """Largest resident set of this process so far [MB] (Linux reports kilobytes)."""
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=2000)
    parser.add_argument("--dates", type=int, default=40)
    parser.add_argument("--data-dir", type=Path, default=HERE / "_data")
    parser.add_argument("--measure-chunks", type=int, default=256,
                        help="chunk edge of the cube opened for measuring (as unmix fractions opens it: the "
                             "block's edge, so a block reads the one tile it lies in)")
    parser.add_argument("--band", default=None, help="registration band (default: every band)")
    parser.add_argument("--blocks", type=int, default=4, help="registration blocks")
    parser.add_argument("--block", type=int, default=256, help="registration block edge [px]")
    parser.add_argument("--repeats", type=int, default=3,
                        help="timings of each measuring path (unmixing: one fewer, at least one); medians compared")
    parser.add_argument("--extras", action="store_true",
                        help="also time the optional full reads (most-valid reference, whole-scene radiometry)")
    args = parser.parse_args(argv)

    import dask

    from unmix.cube import unmix_cube
    from unmix.cube.comparability import measure_comparability, measure_radiometry, reference_date
    from unmix.cube.plausible import DEFAULT_VALID_RANGE
    from unmix.io.stack import open_stack

    folder = args.data_dir / f"related_{args.size}px_{args.dates}d_t512_v2"
    t_make = time.perf_counter()
    files = make_related_stack(folder, args.size, args.dates)
    print(f"stack ready in {time.perf_counter() - t_make:.0f} s: {folder}")
    cube = open_stack(files, sensor="landsat-8-oli", band_names=list(BANDS), scale=1e-4)
    print(f"stack: {cube.sizes['time']} dates x {cube.sizes['band']} bands x {cube.sizes['y']} x "
          f"{cube.sizes['x']} px, chunks {cube.data.chunksize}, {dask.system.CPU_COUNT} threads")

    measured = open_stack(files, sensor="landsat-8-oli", band_names=list(BANDS), scale=1e-4,
                          chunks=args.measure_chunks)
    measured.isel(time=0, y=slice(0, 1), x=slice(0, 1)).compute()  # the tile decoder's first use (numba)
    bands = args.band.split(",") if args.band else None
    n_t, n_b = cube.sizes["time"], cube.sizes["band"]
    stack_mb = 4 * n_t * n_b * cube.sizes["y"] * cube.sizes["x"] / 2 ** 20
    # a small warm-up: the measuring kernels' first use in the process (numba's cache, FFT plans), as the
    # unmixing kernel is compiled below before it is timed
    measure_comparability(measured.isel(time=[0, 1]), band=bands, reference=None, n_blocks=1, block=args.block)
    runs: dict[str, list[float]] = {}
    # alternating, each timed --repeats times: a given reference (streaming: the reference's blocks and the
    # dates in flight), and the default of `unmix fractions`: the reference chosen from the blocks, kept in
    # memory while it is chosen
    paths = (("given reference (first date)", cube["time"].values[0]),
             ("default: reference chosen from the blocks", None))
    for _ in range(args.repeats):
        for label, reference in paths:
            rss_before = _peak_rss_mb()
            t0 = time.perf_counter()
            shifts, fits = measure_comparability(measured, band=bands, reference=reference, n_blocks=args.blocks,
                                                 block=args.block, upsample=20, seed=0,
                                                 valid_range=DEFAULT_VALID_RANGE)  # as unmix fractions measures
            runs.setdefault(label, []).append(time.perf_counter() - t0)
            rss_after = _peak_rss_mb()
            print(f"measuring, {label}: {runs[label][-1]:.2f} s; reference {shifts.attrs['reference']} "
                  f"({shifts.attrs['reference_choice']}); peak resident set {rss_before:.0f} -> {rss_after:.0f} MB "
                  f"(the stack as float32: {stack_mb:.0f} MB)")
    size = np.hypot(shifts.shift_y.values, shifts.shift_x.values)
    print(f"  {shifts.attrs['n_blocks']} blocks of {args.block} px, bands {shifts.attrs['band']}; largest |shift| "
          f"{np.nanmax(size):.2f} px, failed {int((shifts.reason != '').sum())}; median invariant pixels "
          f"{int(np.median(fits.n))}, flagged {int((fits.flag != '').sum())}, of which IR-MAD did not settle "
          f"{int(sum('did not settle' in str(f) for f in fits.flag.values))}")

    M = np.array(list(ENDMEMBERS.values()), dtype=np.float32)
    unmix_cube(cube.isel(time=[0], y=slice(0, 8), x=slice(0, 8)), M, names=list(ENDMEMBERS)).compute()  # compile
    unmixing_runs = []
    for _ in range(max(1, args.repeats - 1)):
        t3 = time.perf_counter()
        unmix_cube(cube, M, names=list(ENDMEMBERS)).compute()
        unmixing_runs.append(time.perf_counter() - t3)
        print(f"unmixing {unmixing_runs[-1]:.1f} s")
    unmixing = float(np.median(unmixing_runs))
    for label, times in runs.items():
        share = float(np.median(times)) / unmixing
        print(f"measuring / unmixing (medians), {label}: {np.median(times):.2f} s / {unmixing:.1f} s = {share:.1%} "
              f"(target <= 15 %: {'met' if share <= 0.15 else 'NOT met'})")
    if not args.extras:
        return
    t5 = time.perf_counter()
    ref = reference_date(cube)
    t6 = time.perf_counter()
    measure_radiometry(cube, reference=ref, seed=0)
    t7 = time.perf_counter()
    print(f"reference by most valid pixels of the whole stack (a full read, optional): {t6 - t5:.1f} s = "
          f"{(t6 - t5) / unmixing:.1%} of unmixing")
    print(f"radiometry on a sample over the whole scene (a full read, optional): {t7 - t6:.1f} s = "
          f"{(t7 - t6) / unmixing:.1%} of unmixing")


if __name__ == "__main__":
    main()
