"""Speed of unmix.solvers.estimate_fractions against per-pixel reference solvers, in one run.

For each case (bands x endmembers) this generates mixtures of which part lie outside the endmember
simplex (as real pixels do), then prints

- our rate (megapixels per second, FCLS, float32 in/out; numba compile time excluded by a warm-up
  call, reported separately);
- the rate of a per-pixel loop of ``scipy.optimize.nnls`` on the sum-to-one-augmented matrix
  (Heinz & Chang 2001), timed on a subsample and scaled, and the ratio;
- the rate of per-pixel ``cvxpy`` (one parametrised problem, re-solved per pixel) on a small sample;
- agreement with both references on their samples;
- memory: the peak of numpy allocations during the call (tracemalloc) and the peak growth of the
  process RSS (psutil, sampled every 2 ms), both relative to the input size.

Run ``python benchmarks/bench_solvers.py --help`` for sizes. Timings on a shared machine are noisy:
the script reports wall time (best of ``--repeat``) and the load average at start.
"""

from __future__ import annotations

import argparse
import os
import threading
import time
import tracemalloc

import numpy as np


def make_case(rng, n, nb, p, outside_spread=1.3, noise=0.005):
    """Smooth reflectance-like endmembers and mixtures, about half of them outside the simplex."""
    wl = np.linspace(0, 1, nb)
    M = np.empty((p, nb))
    for i in range(p):
        c = rng.uniform(0.05, 0.5, 4)
        M[i] = np.clip(c[0] + c[1] * wl + c[2] * np.sin(2 * np.pi * (wl + c[3])) * 0.3, 0.01, 0.9)
    M += rng.uniform(0, 0.03, (p, nb))  # keep them separable
    a = rng.dirichlet(np.ones(p), size=n)
    a = (a - 1.0 / p) * outside_spread + 1.0 / p
    x = (a @ M + rng.normal(0, noise, (n, nb))).astype(np.float32)
    return M, x


def scipy_loop(x, M, delta=1e3):
    from scipy.optimize import nnls

    p = M.shape[0]
    A = np.vstack([delta * np.ones(p), M.T])
    out = np.empty((len(x), p))
    rhs = np.empty(M.shape[1] + 1)
    rhs[0] = delta
    for i, xi in enumerate(x):
        rhs[1:] = xi
        out[i] = nnls(A, rhs)[0]
    return out


def cvxpy_loop(x, M):
    import cvxpy as cp

    p, nb = M.shape
    a = cp.Variable(p)
    xp = cp.Parameter(nb)
    prob = cp.Problem(cp.Minimize(cp.sum_squares(xp - M.T @ a)), [a >= 0, cp.sum(a) == 1])
    out = np.empty((len(x), p))
    for i, xi in enumerate(x):
        xp.value = xi.astype(np.float64)
        prob.solve(solver=cp.CLARABEL)
        out[i] = a.value
    return out


class RssPeak:
    """Peak RSS growth over a block, sampled by a thread."""

    def __init__(self, interval=0.002):
        import psutil

        self.proc = psutil.Process()
        self.interval = interval

    def __enter__(self):
        self.base = self.proc.memory_info().rss
        self.peak = self.base
        self._stop = threading.Event()
        self._t = threading.Thread(target=self._run, daemon=True)
        self._t.start()
        return self

    def _run(self):
        while not self._stop.is_set():
            self.peak = max(self.peak, self.proc.memory_info().rss)
            time.sleep(self.interval)

    def __exit__(self, *exc):
        self._stop.set()
        self._t.join()
        self.peak = max(self.peak, self.proc.memory_info().rss)
        self.growth = self.peak - self.base


def best_time(fn, repeat):
    """(best wall time, best CPU time of the process (all threads), last result)."""
    best, best_cpu = np.inf, np.inf
    out = None
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        out = fn()
        best = min(best, time.perf_counter() - t)
        best_cpu = min(best_cpu, time.process_time() - c)
    return best, best_cpu, out


def run_case(rng, nb, p, n, n_scipy, n_cvxpy, repeat, constraint="fcls"):
    from unmix.solvers import estimate_fractions

    M, x = make_case(rng, n, nb, p)
    t0 = time.perf_counter()
    estimate_fractions(x[:16], M, constraint=constraint)  # compile (or load from cache)
    compile_s = time.perf_counter() - t0
    f_sum1, _ = estimate_fractions(x, M, constraint="sum-to-one")
    share_out = float(np.mean(np.any(f_sum1 < 0, axis=-1)))
    del f_sum1

    t_ours, c_ours, (f, rmse) = best_time(lambda: estimate_fractions(x, M, constraint=constraint), repeat)
    ours, ours_cpu = n / t_ours, n / c_ours

    tracemalloc.start()
    with RssPeak() as rss:
        f2, r2 = estimate_fractions(x, M, constraint=constraint)
    _, traced_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    out_bytes = f2.nbytes + r2.nbytes
    del f2, r2

    sub = x[:n_scipy]
    t, c = time.perf_counter(), time.process_time()
    ref = scipy_loop(sub, M)
    scipy_rate = len(sub) / (time.perf_counter() - t)
    scipy_cpu = len(sub) / (time.process_time() - c)
    diff_scipy = float(np.max(np.abs(ref - f[:n_scipy])))

    sub = x[:n_cvxpy]
    t = time.perf_counter()
    ref_c = cvxpy_loop(sub, M)
    cvx_rate = len(sub) / (time.perf_counter() - t)
    diff_cvx = float(np.max(np.abs(ref_c - f[:n_cvxpy])))
    xs = sub.astype(np.float64)
    f64, _ = estimate_fractions(xs, M, constraint=constraint)  # float64 run: no output rounding
    obj_ours = np.sum((xs - f64 @ M) ** 2, axis=1)
    obj_cvx = np.sum((xs - ref_c @ M) ** 2, axis=1)

    return dict(
        case=f"{nb} bands x {p} endmembers",
        n=n,
        share_out=share_out,
        compile_s=compile_s,
        ours=ours,
        ours_cpu=ours_cpu,
        scipy=scipy_rate,
        scipy_cpu=scipy_cpu,
        cvx=cvx_rate,
        diff_scipy=diff_scipy,
        diff_cvx=diff_cvx,
        obj_gap=float(np.max(obj_ours - obj_cvx)),
        in_bytes=x.nbytes,
        out_bytes=out_bytes,
        traced_peak=traced_peak,
        rss_growth=rss.growth,
    )


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pixels", type=int, default=4_000_000, help="pixels of the 6-band case")
    ap.add_argument("--pixels-200", type=int, default=400_000, help="pixels of the 200-band case")
    ap.add_argument("--scipy-sample", type=int, default=20_000, help="pixels for the scipy loop")
    ap.add_argument("--cvxpy-sample", type=int, default=100, help="pixels for the cvxpy loop")
    ap.add_argument("--repeat", type=int, default=3, help="timed repeats of our call (best is kept)")
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args(argv)

    import numba

    rng = np.random.default_rng(args.seed)
    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    print(
        f"numba threads: {numba.get_num_threads()}, cpus: {os.cpu_count()}, "
        f"load average at start: {load[0]:.1f} {load[1]:.1f} {load[2]:.1f}"
    )
    print("FCLS, float32 in/out; our time is wall clock, best of --repeat, compile excluded\n")
    rows = [
        run_case(rng, 6, 4, args.pixels, args.scipy_sample, args.cvxpy_sample, args.repeat),
        run_case(rng, 200, 5, args.pixels_200, max(1, args.scipy_sample // 4), args.cvxpy_sample, args.repeat),
    ]
    head = (
        f"{'case':<26}{'pixels':>10}{'outside':>9}{'ours Mpx/s':>12}{'scipy px/s':>12}{'x scipy':>9}"
        f"{'cvxpy px/s':>12}{'x cvxpy':>10}{'ours Mpx/cpu-s':>16}{'scipy px/cpu-s':>16}"
    )
    print(head)
    print("-" * len(head))
    for r in rows:
        print(
            f"{r['case']:<26}{r['n']:>10}{r['share_out']:>9.0%}{r['ours'] / 1e6:>12.2f}{r['scipy']:>12.0f}"
            f"{r['ours'] / r['scipy']:>9.0f}{r['cvx']:>12.0f}{r['ours'] / r['cvx']:>10.0f}"
            f"{r['ours_cpu'] / 1e6:>16.2f}{r['scipy_cpu']:>16.0f}"
        )
    print()
    head = (
        f"{'case':<26}{'compile s':>10}{'|d| scipy':>11}{'|d| cvxpy':>11}{'obj-cvxpy':>11}"
        f"{'input MB':>10}{'output MB':>10}{'numpy peak MB':>14}{'RSS peak+ MB':>13}"
    )
    print(head)
    print("-" * len(head))
    for r in rows:
        print(
            f"{r['case']:<26}{r['compile_s']:>10.1f}{r['diff_scipy']:>11.1e}{r['diff_cvx']:>11.1e}"
            f"{r['obj_gap']:>11.1e}{r['in_bytes'] / 1e6:>10.1f}{r['out_bytes'] / 1e6:>10.1f}"
            f"{r['traced_peak'] / 1e6:>14.1f}{r['rss_growth'] / 1e6:>13.1f}"
        )
    print(
        "\nRates: wall clock (x = ratio of wall-clock rates, ours on all numba threads); 'per cpu-s' = "
        "pixels per second of process CPU time, a fairer figure on a shared machine. 'outside' = share of "
        "pixels whose sum-to-one solution has a negative fraction (these take the active-set path)."
    )
    print(
        "|d| = largest fraction difference on the reference's sample (float32 outputs; the scipy "
        "reference is a penalty approximation, weight 1e3); obj-cvxpy = largest (ours - cvxpy) squared "
        "residual, ours from a float64 run (<= ~0 means ours is at least as good). Memory: the call allocates its outputs plus "
        "small per-thread scratch; 'numpy peak' counts numpy allocations during the call."
    )


if __name__ == "__main__":
    main()
