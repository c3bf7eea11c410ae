"""What does the coverage test's law under persistent day shocks cost per row? (issue 14, item 0)

    python tests/benchmarks/bench_persistent_misses.py [--rows 100,1000,3000,10000,30000]
        [--days 14] [--phi 0.3] [--repeats 7]

Times ``persistent_pvalues`` (monitor.stats.persistent_misses), which a night calls twice a
model-day when the fit window's day shocks persist: a window of ``--days`` days with Poisson day
sizes around each volume, the miss count at its expectation, the law's parameters those of the
demo's loading model (day-to-day sd 2, within-day sd 7, 95 % intervals). Median of
``--repeats`` calls after one warm-up call. To compare with another checkout, run this file
with ``PYTHONPATH=DIR`` (the checkout's package is then imported instead of this one's).

Goal: the cost per window row flat from 1 000 to 30 000 rows a day (within 1.5x).
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import time

import numpy as np

import monitor
from monitor.stats.misses import MissLaw
from monitor.stats.persistent_misses import persistent_pvalues


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", default="100,1000,3000,10000,30000")
    parser.add_argument("--days", type=int, default=14)
    parser.add_argument("--phi", type=float, default=0.3)
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()
    law = MissLaw(tau2=4.0, sigma_w2=49.0, half_width=1.96 * 7.3)
    rng = np.random.default_rng(1)
    print(f"persistent_pvalues, {args.days}-day window, phi {args.phi}, median of "
          f"{args.repeats} ({platform.machine()}, {os.cpu_count()} cores, load "
          f"{os.getloadavg()[0]:.2f}; package {os.path.dirname(monitor.__file__)})")
    for per_day in (int(v) for v in args.rows.split(",")):
        rows = rng.poisson(per_day, args.days)
        misses = round(float(rows.sum()) * law.miss_rate)
        persistent_pvalues(law, rows, misses, args.phi)  # warm the transition matrix cache
        took = []
        for _ in range(args.repeats):
            began = time.perf_counter()
            persistent_pvalues(law, rows, misses, args.phi)
            took.append(time.perf_counter() - began)
        t = statistics.median(took)
        print(f"{per_day:6d} rows/day, {misses:6d} misses: {t * 1e3:8.1f} ms a p-value pair, "
              f"{t / rows.sum() * 1e9:7.1f} ns per window row", flush=True)


if __name__ == "__main__":
    main()
