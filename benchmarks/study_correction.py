"""Which serial-correlation correction should the Mann-Kendall test use by default?

Simulates AR(1) noise x_t = phi x_{t-1} + e_t scaled to unit marginal standard deviation, for
phi in {0, 0.3, 0.6} and n in {15, 30, 40}, without a trend (false-positive rate) and with a linear
trend whose total change over the series is ``--change`` (power) or ``--strong`` (strong-trend
power) marginal standard deviations, then runs ``unmix.trend.mann_kendall`` (batched) with every
correction and prints a markdown table of the share of series with p < alpha.

The rule for ``DEFAULT_CORRECTION``: among the corrections whose false-positive rate at phi = 0.6,
n = 30 is <= 0.10, the one with the best power (mean of the power and strong-trend power over all
cells); the script prints the candidate it picks by that rule next to the current default.

Run:  python benchmarks/study_correction.py [--series 2000] [--change 1.5] [--strong 3.0]
      [--alpha 0.05] [--seed 0]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from unmix.trend import DEFAULT_CORRECTION, MannKendallCorrection, mann_kendall


def ar1(rng, n_series, n, phi):
    """AR(1) series with unit marginal variance, started from the stationary distribution."""
    e = rng.standard_normal((n_series, n)) * np.sqrt(1.0 - phi**2)
    x = np.empty((n_series, n))
    x[:, 0] = rng.standard_normal(n_series)
    for k in range(1, n):
        x[:, k] = phi * x[:, k - 1] + e[:, k]
    return x


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--series", type=int, default=2000, help="series per cell")
    ap.add_argument("--change", type=float, default=1.5,
                    help="total trend over the series [marginal noise sd]")
    ap.add_argument("--strong", type=float, default=3.0,
                    help="total strong trend over the series [marginal noise sd]")
    ap.add_argument("--alpha", type=float, default=0.05)
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args(argv)
    rng = np.random.default_rng(a.seed)
    corrections = list(MannKendallCorrection)
    mann_kendall(np.zeros((2, 5)) + np.arange(5))  # compile outside the timing
    t0 = time.perf_counter()
    rows = []
    undefined = {c: 0 for c in corrections}
    for phi in (0.0, 0.3, 0.6):
        for n in (15, 30, 40):
            noise = ar1(rng, a.series, n, phi)
            ramp = np.arange(n) / (n - 1)
            cells = []
            for corr in corrections:
                p0 = mann_kendall(noise, correction=corr).p_value
                p1 = mann_kendall(noise + a.change * ramp, correction=corr).p_value
                p2 = mann_kendall(noise + a.strong * ramp, correction=corr).p_value
                undefined[corr] += int(np.isnan(p0).sum() + np.isnan(p1).sum()
                                       + np.isnan(p2).sum())
                # an undefined p (Hamed-Rao factor <= 0) counts as "not significant"
                cells.append((np.mean(p0 < a.alpha), np.mean(p1 < a.alpha),
                              np.mean(p2 < a.alpha)))
            rows.append((phi, n, cells))
    dt = time.perf_counter() - t0

    print(f"Mann-Kendall at nominal alpha = {a.alpha}; {a.series} AR(1) series per cell (unit "
          f"marginal sd); power with a linear trend of {a.change} sd and strong-trend power with "
          f"{a.strong} sd over the series; seed {a.seed}.")
    print("Cells: false-positive rate / power / strong-trend power.\n")
    print("| phi | n | " + " | ".join(c.value for c in corrections) + " |")
    print("|---|---|" + "---|" * len(corrections))
    for phi, n, cells in rows:
        print(f"| {phi:.1f} | {n} | "
              + " | ".join(f"{f:.3f} / {pw:.3f} / {ps:.3f}" for f, pw, ps in cells) + " |")
    print()
    print("undefined p-values (counted as not significant): "
          + ", ".join(f"{c.value}: {undefined[c]}" for c in corrections))
    target = [cells for phi, n, cells in rows if phi == 0.6 and n == 30][0]
    ok = [i for i, (f, _, _) in enumerate(target) if f <= 0.10]
    print("corrections with false-positive rate <= 0.10 at phi = 0.6, n = 30: "
          + ", ".join(corrections[i].value for i in ok))
    print("worst false-positive rate over all cells: " + ", ".join(
        f"{c.value} {max(cells[i][0] for _, _, cells in rows):.3f}"
        for i, c in enumerate(corrections)))
    mean_power = {i: np.mean([cells[i][1] + cells[i][2] for _, _, cells in rows]) / 2
                  for i in range(len(corrections))}
    print("mean power (trend and strong trend, all cells): " + ", ".join(
        f"{c.value} {mean_power[i]:.3f}" for i, c in enumerate(corrections)))
    if ok:
        best = max(ok, key=lambda i: mean_power[i])
        print(f"rule's choice: {corrections[best].value!r}")
    print(f"DEFAULT_CORRECTION = {DEFAULT_CORRECTION.value!r}")
    print(f"({2 * len(rows) * len(corrections) * a.series} tests in {dt:.1f} s)")


if __name__ == "__main__":
    main()
