"""Timings of the bias CUSUM: vectorized path vs a plain loop, ARL evaluation, calibration.

Run as ``python tests/benchmarks/bench_cusum.py [--values 1000000]``. Every figure is the best of
a few repeats, measured in this run on this machine.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.stats.arl import cusum_arl, solve_h
from monitor.stats.calibration import ChartDesign, calibrate_h
from monitor.stats.cusum import tabular_cusum
from monitor.stats.day_effects import day_effects_of_fit
from monitor.stats.moments import DayMoments
from monitor.stats.ols import fit_moments


def best(fn: Callable[[], object], repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def python_loop(u: np.ndarray, k: float, h: float) -> tuple[list, list, list, list, list]:
    """The hand-written baseline: both sides, run counters and signals, one value at a time."""
    up = lo = 0.0
    nu = nl = 0
    cu, cl, ru, rl, sig = [], [], [], [], []
    for v in u.tolist():
        up = max(0.0, up + (v - k))
        lo = max(0.0, lo + (-v - k))
        nu = nu + 1 if up > 0.0 else 0
        nl = nl + 1 if lo > 0.0 else 0
        cu.append(up)
        cl.append(lo)
        ru.append(nu)
        rl.append(nl)
        sig.append(up > h or lo > h)
    return cu, cl, ru, rl, sig


def demo_design() -> ChartDesign:
    rng = np.random.default_rng(1)
    counts = rng.poisson(80, 60)
    day = np.repeat(np.arange(60), counts)
    x = np.repeat(rng.uniform(14, 26, 60), counts) + rng.normal(0, 4, counts.sum())
    y = 20 + 2.1 * x + rng.normal(0, 2.5, 60)[day] + rng.normal(0, 6, counts.sum())
    days = DayMoments.from_rows(day, np.column_stack([x, y]))
    fit = fit_moments(days.total())
    return ChartDesign.from_fit(fit, days, day_effects_of_fit(days, fit.coef))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--values", type=int, default=1_000_000)
    args = parser.parse_args()
    rng = np.random.default_rng(20240611)
    u = rng.normal(0.0, 1.0, args.values)
    u[args.values // 2:] += 0.3  # a shift halfway: long runs as well as short ones
    k, h = 0.5, 5.0

    vec = best(lambda: tabular_cusum(u, k, h), 5)
    loop = best(lambda: python_loop(u, k, h), 2)
    path, ref = tabular_cusum(u, k, h), python_loop(u, k, h)
    gap = max(float(np.max(np.abs(path.upper - np.array(ref[0])))),
              float(np.max(np.abs(path.lower - np.array(ref[1])))))
    same_signals = bool(np.array_equal(path.signal, np.array(ref[4])))
    print(f"two-sided tabular CUSUM over {args.values:,} values (k = {k}, h = {h})")
    print(f"  vectorized tabular_cusum   {vec * 1000:9.1f} ms")
    print(f"  Python loop baseline       {loop * 1000:9.1f} ms")
    print(f"  ratio loop / vectorized    {loop / vec:9.1f} x")
    print(f"  largest difference to the loop {gap:.2e}; same signals: {same_signals}")

    one = best(lambda: cusum_arl(k, 5.7574), 200)
    many = best(lambda: cusum_arl(k, np.full(400, 6.0), rng.normal(0, 0.1, 400),
                                  rng.uniform(0.9, 1.2, 400)), 5)
    inverse = best(lambda: solve_h(k, 1000.0), 5)
    print("average run length")
    print(f"  cusum_arl, one two-sided chart       {one * 1e6:9.0f} us")
    print(f"  cusum_arl, 400 charts in one call    {many * 1000:9.1f} ms")
    print(f"  solve_h(k = 0.5, ARL 1000)           {inverse * 1000:9.1f} ms")

    design = demo_design()
    cal = calibrate_h(design, draws=400)
    cost = best(lambda: calibrate_h(design, draws=400), 3)
    print(f"calibrate_h, 60 days x ~80 rows, 400 draws: {cost * 1000:.0f} ms (h = {cal.h:.3f}; "
          f"h for known parameters {cal.h_known:.3f}; ARL at h if exact {cal.arl_known:.0f})")


if __name__ == "__main__":
    main()
