"""Speed of unmix.mesma.mesma against a per-model loop of the plain unmixing kernel.

Scene: 3 classes x 5 members + shade (215 candidate models), synthetic mixtures (one random member
per class, Dirichlet fractions, 40 dB noise) on

* 6 bands: smooth 400-2500 nm spectra resampled to Landsat 8 OLI bands 2-7, 1 million pixels;
* 200 bands: smooth spectra, 100 000 pixels.

Reference: :func:`unmix.solvers.estimate_fractions` called once per candidate model on all pixels,
then the same selection rule in numpy (running best per model size, then the rmse-gain rule). The
reference runs on the first ``--ref-fraction`` of the same pixels (it is slow); rates are per pixel,
and the agreement of the chosen members on the shared pixels is printed.

Usage: ``python benchmarks/bench_mesma.py [--pixels 1000000] [--pixels-hyper 100000]
[--ref-fraction 0.25] [--repeat 1]``. Timings are wall-clock on whatever else the machine runs.
"""

from __future__ import annotations

import argparse
import itertools
import os
import time
import warnings

import numpy as np

from unmix.errors import CollinearityWarning
from unmix.mesma import mesma
from unmix.solvers import estimate_fractions


def smooth_spectra(rng, n, n_wl, base=None, amp=0.1, n_harm=6):
    wl = np.linspace(0.0, 1.0, n_wl)
    k = np.arange(1, n_harm + 1)
    coef = rng.normal(0.0, 1.0, (n, n_harm)) / k
    s = amp * (coef @ np.sin(np.pi * np.outer(k, wl)))
    base = 0.25 + np.zeros(n_wl) if base is None else base
    return np.clip(base + s, 0.01, 0.9)


def make_bundles(rng, n_bands, n_classes=3, n_members=5):
    if n_bands == 6:
        from unmix.sensors import get_sensor
        from unmix.spectra import resample_spectra

        wl = np.arange(400.0, 2501.0, 10.0)
        sensor = get_sensor("landsat-8-oli")
        names = [b.name for b in sensor.bands][1:7]
        conv = lambda s: resample_spectra(s, wl, sensor, names)  # noqa: E731
        n_wl = wl.size
    else:
        conv = lambda s: s  # noqa: E731
        n_wl = n_bands
    out = {}
    for c in range(n_classes):
        base = smooth_spectra(rng, 1, n_wl, amp=0.12)[0]
        out[f"class{c}"] = conv(smooth_spectra(rng, n_members, n_wl, base=base, amp=0.03))
    return out


def make_scene(rng, bundles, shade, n_pix, snr_db=40.0):
    names = list(bundles)
    nc = len(names)
    frac = rng.dirichlet(np.ones(nc + 1), n_pix)
    x = frac[:, nc:] * shade[None, :]
    for k, c in enumerate(names):
        x = x + frac[:, k : k + 1] * bundles[c][rng.integers(0, bundles[c].shape[0], n_pix)]
    sigma = np.sqrt(np.mean(x**2, axis=1, keepdims=True)) / 10 ** (snr_db / 20)
    return (x + rng.normal(0.0, 1.0, x.shape) * sigma).astype(np.float32)


def reference_mesma(x, bundles, shade, constraint, max_rmse=0.025, lo=-0.05, hi=1.05, max_shade=0.8,
                    gain=0.001):
    """Per-model loop of the plain kernel + the documented selection in numpy."""
    names = list(bundles)
    nc = len(names)
    n = x.shape[0]
    counts = [bundles[c].shape[0] for c in names]
    sel_m = np.full((n, nc), -1, np.int16)
    sel_f = np.full((n, nc + 1), np.nan, np.float32)
    sel_r = np.full(n, np.inf, np.float32)
    for size in range(1, nc + 1):
        best_r = np.full(n, np.inf, np.float32)
        best_f = np.zeros((n, nc + 1), np.float32)
        best_m = np.full((n, nc), -1, np.int16)
        for cls in itertools.combinations(range(nc), size):
            for mem in itertools.product(*(range(counts[k]) for k in cls)):
                M = np.array([bundles[names[k]][j] for k, j in zip(cls, mem)] + [shade])
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", CollinearityWarning)
                    f, r = estimate_fractions(x, M, constraint=constraint)
                cf = f[:, :size]
                ok = (r <= max_rmse) & np.all((cf >= lo) & (cf <= hi), axis=1)
                ok &= (f[:, -1] >= lo) & (f[:, -1] <= max_shade)
                if constraint == "fcls":
                    ok &= np.all(cf > 0, axis=1)
                better = ok & (r < best_r)
                best_r[better] = r[better]
                row = np.zeros((better.sum(), nc + 1), np.float32)
                row[:, list(cls) + [nc]] = f[better]
                best_f[better] = row
                best_m[better] = -1
                best_m[np.ix_(better, list(cls))] = np.array(mem, np.int16)
        take = np.isfinite(best_r) & (~np.isfinite(sel_r) | (best_r < sel_r - gain))
        sel_r[take], sel_f[take], sel_m[take] = best_r[take], best_f[take], best_m[take]
    sel_r[~np.isfinite(sel_r)] = np.nan
    return sel_f, sel_m, sel_r


def run_case(label, n_bands, n_pix, ref_fraction, repeat, rng):
    bundles = make_bundles(rng, n_bands)
    shade = np.zeros(n_bands)
    x = make_scene(rng, bundles, shade, n_pix)
    n_ref = max(1, int(n_pix * ref_fraction))
    rows = []
    for constraint in ("sum-to-one", "fcls"):
        mesma(x[:1000], bundles, shade=shade, constraint=constraint)  # compile / load the cache
        t_ours = min(_timed(lambda: mesma(x, bundles, shade=shade, constraint=constraint)) for _ in range(repeat))
        res = mesma(x[:n_ref], bundles, shade=shade, constraint=constraint)
        reference_mesma(x[:100], bundles, shade, constraint)
        t0 = time.perf_counter()
        rf, rm, rr = reference_mesma(x[:n_ref], bundles, shade, constraint)
        t_ref = time.perf_counter() - t0
        agree = np.mean(np.all(res.members == rm, axis=1))
        dfrac = np.nanmax(np.abs(res.fractions - rf)) if np.isfinite(rf).any() else 0.0
        r_ours = n_pix / t_ours / 1e6
        r_ref = n_ref / t_ref / 1e6
        rows.append((label, constraint, n_pix, res.n_models, t_ours, r_ours, n_ref, t_ref, r_ref,
                     r_ours / r_ref, agree, dfrac))
    return rows


def _timed(fn):
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pixels", type=int, default=1_000_000, help="pixels of the 6-band case")
    ap.add_argument("--pixels-hyper", type=int, default=100_000, help="pixels of the 200-band case")
    ap.add_argument("--ref-fraction", type=float, default=0.25, help="share of the pixels the reference runs on")
    ap.add_argument("--repeat", type=int, default=1, help="timed runs of ours (best is kept)")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(0)
    print(f"cores: {os.cpu_count()}, load average: {os.getloadavg()[0]:.1f} (shared machine: noisy)")
    rows = run_case("6 bands (OLI)", 6, args.pixels, args.ref_fraction, args.repeat, rng)
    rows += run_case("200 bands", 200, args.pixels_hyper, args.ref_fraction, args.repeat, rng)
    head = (f"{'case':14s} {'constraint':10s} {'pixels':>9s} {'models':>6s} {'ours s':>7s} {'ours Mpx/s':>10s} "
            f"{'ref px':>8s} {'ref s':>7s} {'ref Mpx/s':>9s} {'speed-up':>8s} {'same members':>12s} {'max |df|':>9s}")
    print(head)
    print("-" * len(head))
    for r in rows:
        print(f"{r[0]:14s} {r[1]:10s} {r[2]:9d} {r[3]:6d} {r[4]:7.2f} {r[5]:10.3f} {r[6]:8d} {r[7]:7.2f} "
              f"{r[8]:9.4f} {r[9]:7.1f}x {r[10]:12.4f} {r[11]:9.1e}")
    print(f"load average after: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
