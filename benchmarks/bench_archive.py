"""End-to-end ``unmix fractions`` on delivered-product layouts against a one-file-per-date stack, same run.

Three stacks of the same scene (size x size pixels of 30 m, N dates, the same mixed reflectance):

* ``plain``: one int16 6-band deflate GeoTIFF per date (what ``unmix fractions`` read before delivered
  products were supported; the reference);
* ``landsat``: Landsat Collection 2 Level-2 layout, one uint16 deflate GeoTIFF per band, QA_PIXEL and
  MTL per scene (written by :func:`unmix.io.archive.write.write_landsat_l2`);
* ``sentinel2``: Sentinel-2 L2A layout, 10 m bands (blue, green, red) and 20 m bands (nir = B8A, swir1,
  swir2) plus SCL as GeoTIFF, read onto the 30 m grid of the other two (``--grid``) by area averaging.

Each is run with the command in a subprocess (peak resident memory polled with psutil); the script
prints pixel-dates per second, the ratio to ``plain`` and peak memory. Targets (issue on real archives):
Landsat >= 0.8 and Sentinel-2 >= 0.5 of the plain stack's rate; memory bounded by the chunk, not by the
number of dates (compare ``--dates 10`` with ``--dates 40``).

Usage::

    python benchmarks/bench_archive.py                   # 1000 x 1000 px, 20 dates
    python benchmarks/bench_archive.py --size 2000 --dates 40   # the issue's case (writes ~8 GB of files)

Generated stacks are kept in ``benchmarks/_data/`` (git-ignored) and reused.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(HERE))

from bench_pipeline import run_measured  # noqa: E402

NAMES = ("green_vegetation", "bright_soil", "shade")


def _reflectance(spectra: np.ndarray, size: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    frac = rng.dirichlet(np.ones(len(spectra)), size=(size, size)).astype(np.float32)
    refl = frac @ spectra.astype(np.float32) + rng.normal(0, 0.003, (size, size, spectra.shape[1])).astype(np.float32)
    return np.moveaxis(refl, -1, 0)


def make_stacks(root: Path, size: int, n_dates: int) -> dict[str, Path]:
    import rasterio
    from affine import Affine

    from unmix.io.archive.write import write_landsat_l2
    from unmix.io.library import read_shipped_library
    from unmix.sensors.roles import bands_for_roles
    from unmix.spectra import resample

    lib = read_shipped_library("demo_library").select(list(NAMES))
    oli = resample(lib, "landsat-8-oli", bands_for_roles("landsat-8-oli")).spectra
    msi = resample(lib, "sentinel-2a-msi", bands_for_roles("sentinel-2a-msi")).spectra
    crs, left, top = "EPSG:32612", 400000.0, 3500000.0
    paths = {k: root / f"{k}_{size}px_{n_dates}d" for k in ("plain", "landsat", "sentinel2")}
    dates = [np.datetime64("2014-01-10") + np.timedelta64(int(t * 365.25 / 4), "D") for t in range(n_dates)]
    profile = dict(driver="GTiff", tiled=True, blockxsize=512, blockysize=512, compress="deflate", predictor=2, crs=crs)
    for t, day in enumerate(dates):
        stamp = str(day).replace("-", "")
        if not (paths["plain"] / f"scene_{day}.tif").exists():
            refl = _reflectance(oli, size, t)
            paths["plain"].mkdir(parents=True, exist_ok=True)
            tmp = paths["plain"] / f".scene_{day}.partial"
            with rasterio.open(tmp, "w", width=size, height=size, count=6, dtype="int16", nodata=-9999,
                               transform=Affine(30, 0, left, 0, -30, top), **profile) as dst:
                dst.write(np.round(refl * 10000).astype(np.int16))
            os.replace(tmp, paths["plain"] / f"scene_{day}.tif")
        if not any(paths["landsat"].glob(f"LC08_*_{stamp}_*")):
            write_landsat_l2(_reflectance(oli, size, t)[None], [day], ["landsat-8-oli"], paths["landsat"], crs=crs,
                             transform=(30.0, 0.0, left, 0.0, -30.0, top))
        safe = paths["sentinel2"] / f"S2A_MSIL2A_{stamp}T180000_N0400_R041_T12STA_{stamp}T200000.SAFE"
        if not (safe / "MTD_MSIL2A.xml").exists():
            refl = _reflectance(msi, size, t)
            img = safe / "GRANULE" / "L2A_T12STA" / "IMG_DATA"
            for k, (band, res) in enumerate((("B02", 10), ("B03", 10), ("B04", 10), ("B8A", 20), ("B11", 20),
                                             ("B12", 20))):
                n = size * 30 // res
                data = np.repeat(np.repeat(refl[k], 30 // res, axis=0), 30 // res, axis=1) if res == 10 else \
                    np.kron(refl[k], np.ones((3, 3), np.float32))[::2, ::2]
                (img / f"R{res}m").mkdir(parents=True, exist_ok=True)
                with rasterio.open(img / f"R{res}m" / f"T12STA_{stamp}T180000_{band}_{res}m.tif", "w", width=n,
                                   height=n, count=1, dtype="uint16", nodata=0,
                                   transform=Affine(res, 0, left, 0, -res, top), **profile) as dst:
                    dst.write(np.clip(np.round(data[:n, :n] * 10000 + 1000), 1, 65535).astype(np.uint16), 1)
            n20 = size * 30 // 20
            with rasterio.open(img / "R20m" / f"T12STA_{stamp}T180000_SCL_20m.tif", "w", width=n20, height=n20,
                               count=1, dtype="uint8", transform=Affine(20, 0, left, 0, -20, top), **profile) as dst:
                dst.write(np.full((n20, n20), 4, np.uint8), 1)
            offsets = "".join(f'<BOA_ADD_OFFSET band_id="{i}">-1000</BOA_ADD_OFFSET>' for i in range(13))
            (safe / "MTD_MSIL2A.xml").write_text(
                "<Level-2A_User_Product><PROCESSING_BASELINE>04.00</PROCESSING_BASELINE><PRODUCT_TYPE>S2MSI2A"
                "</PRODUCT_TYPE><SPACECRAFT_NAME>Sentinel-2A</SPACECRAFT_NAME><BOA_QUANTIFICATION_VALUE>10000"
                f"</BOA_QUANTIFICATION_VALUE>{offsets}</Level-2A_User_Product>")
    return paths


def run(args: list[str]) -> tuple[float, float, str]:
    """One ``unmix fractions`` subprocess of this tree: (wall s, peak RSS bytes, summary)."""
    cmd = [sys.executable, "-m", "unmix.cli.main", "fractions", *args]
    seconds, _, peak, summary = run_measured(cmd, env=dict(os.environ, PYTHONPATH=str(REPO)))
    return seconds, peak, summary


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--size", type=int, default=1000, help="image edge [30 m pixels]")
    parser.add_argument("--dates", type=int, default=20)
    parser.add_argument("--rounds", type=int, default=2)
    parser.add_argument("--data", type=Path, default=HERE / "_data")
    args = parser.parse_args(argv)
    t0 = time.perf_counter()
    paths = make_stacks(args.data, args.size, args.dates)
    print(f"stacks of {args.dates} dates, {args.size} x {args.size} px: prepared in {time.perf_counter() - t0:.0f} s; "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f}")
    from unmix.io.library import shipped_library_path

    lib = str(shipped_library_path("demo_library"))
    common = ["--library", lib, "--endmembers", ",".join(NAMES), "--overwrite"]
    rates: dict[str, list[float]] = {k: [] for k in paths}
    peaks: dict[str, float] = {}
    with tempfile.TemporaryDirectory(prefix="unmix-bench-archive-") as tmp:
        for r in range(args.rounds):
            for kind, path in paths.items():
                if kind == "plain":
                    extra = ["--sensor", "landsat-8-oli", "--band-names", "B2,B3,B4,B5,B6,B7", "--scale", "0.0001"]
                elif kind == "sentinel2":  # onto the 30 m grid of the other two (default: its own 20 m grid)
                    extra = ["--grid", str(sorted(paths["plain"].glob("scene_*.tif"))[0])]
                else:
                    extra = []
                seconds, peak, summary = run([str(path), *common, *extra, "--out", str(Path(tmp) / kind)])
                px = args.size * args.size * args.dates
                rates[kind].append(px / seconds)
                peaks[kind] = max(peaks.get(kind, 0), peak)
                print(f"  round {r + 1} {kind:>9}: {seconds:6.1f} s, {px / seconds:,.0f} pixel-dates/s, "
                      f"peak {peak / 2**30:.2f} GB")
    best = {k: max(v) for k, v in rates.items()}
    print(f"best of {args.rounds}: " + ", ".join(f"{k} {v:,.0f}" for k, v in best.items()) + " pixel-dates/s")
    for kind, target in (("landsat", 0.8), ("sentinel2", 0.5)):
        ratio = best[kind] / best["plain"]
        print(f"{kind} / plain: {ratio:.2f} (target >= {target}: {'met' if ratio >= target else 'NOT met'}); "
              f"peak memory {peaks[kind] / 2**30:.2f} GB (plain {peaks['plain'] / 2**30:.2f} GB)")


if __name__ == "__main__":
    main()
