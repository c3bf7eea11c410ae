"""How long does fitting a version take at high volume, now that the fit window's diagnosis
reads every row (robust scale, guarded slopes, their noise ratio and between-day variance)?

    python tests/benchmarks/bench_diagnosis.py [--days 60] [--rows 30000] [--repeats 3]

Times ``monitor.lifecycle.fit.fit_window`` (the least-squares fit, the intervals' calibration
and the diagnosis) on ``days`` days of ``rows`` rows each: one predictor, a day shock, normal
rows with 1 % breakdowns. Baseline in the same run: the least-squares fit alone on the same
rows (``numpy.linalg.lstsq`` on ``[1, x]``). To compare with an earlier commit, run the same
script with ``PYTHONPATH`` set to a worktree of it.
"""

from __future__ import annotations

import argparse
import platform
import time

import numpy as np

import monitor
from monitor.config import Settings
from monitor.lifecycle.fit import fit_window


def best_of(repeats: int, run) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        run()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--days", type=int, default=60)
    parser.add_argument("--rows", type=int, default=30000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    rng = np.random.default_rng(1)
    n = args.days * args.rows
    x = rng.uniform(4, 30, n)[:, None]
    day_index = np.repeat(np.arange(args.days), args.rows)
    y = (9 + 2 * x[:, 0] + np.repeat(rng.normal(0, 2.5, args.days), args.rows)
         + rng.normal(0, 5, n) + 40 * (rng.random(n) < 0.01))
    days = np.datetime64("2026-01-01") + day_index
    check = Settings().for_model("bench").check
    design = np.column_stack([np.ones(n), x])
    lstsq = best_of(args.repeats, lambda: np.linalg.lstsq(design, y, rcond=None))
    fit = best_of(args.repeats,
                  lambda: fit_window(x, y, days, ("pallets",), check.level, check))
    print(f"fit_window, {args.days} days x {args.rows} rows ({n:,} rows), best of "
          f"{args.repeats} ({platform.machine()}, Python {platform.python_version()}, "
          f"monitor from {monitor.__file__})")
    print(f"baseline lstsq       {lstsq:7.3f} s")
    print(f"fit_window           {fit:7.3f} s   ratio {fit / lstsq:5.1f}")


if __name__ == "__main__":
    main()
