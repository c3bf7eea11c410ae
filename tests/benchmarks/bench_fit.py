"""A fit from merged day statistics against a least-squares fit on the raw rows.

    python tests/benchmarks/bench_fit.py [--days 365] [--rows 2000] [--predictors 2]

The statistics are built once (ingestion does that, day by day); a refit or a window test then
merges the days and solves a (k+1)x(k+1) system. Baseline: a hand-written fit on the raw rows,
``numpy.linalg.lstsq`` on ``[1, X]``, and fitwatch's own QR path (``fit_ols``), measured in the
same run. Also prints the agreement of the coefficients.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.stats.moments import DayMoments
from monitor.stats.ols import fit_moments, fit_ols


def best(fn: Callable[[], object], repeat: int) -> float:
    times = []
    for _ in range(repeat):
        began = time.perf_counter()
        fn()
        times.append(time.perf_counter() - began)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--days", type=int, default=365)
    parser.add_argument("--rows", type=int, default=2000)
    parser.add_argument("--predictors", type=int, default=2)
    args = parser.parse_args()
    rng = np.random.default_rng(3)
    n = args.days * args.rows
    labels = np.repeat(np.arange(args.days), args.rows)
    x = rng.normal(20, 6, (n, args.predictors))
    y = 9 + x @ np.linspace(2.1, 0.3, args.predictors) + rng.normal(0, 5, n)
    design = np.column_stack([np.ones(n), x])

    built = time.perf_counter()
    days = DayMoments.from_rows(labels, np.column_stack([x, y]))
    built = time.perf_counter() - built
    ours = best(lambda: fit_moments(days.total()), 20)
    lstsq = best(lambda: np.linalg.lstsq(design, y, rcond=None), 3)
    qr = best(lambda: fit_ols(x, y), 3)
    a = fit_moments(days.total()).coef
    b = np.linalg.lstsq(design, y, rcond=None)[0]
    print(f"{args.days} days x {args.rows} rows, {args.predictors} predictor(s)")
    print(f"  day statistics from rows (once, at ingest)   {built * 1000:9.1f} ms")
    print(f"  fit from merged day statistics               {ours * 1000:9.2f} ms")
    print(f"  baseline: numpy lstsq on raw rows            {lstsq * 1000:9.1f} ms  "
          f"(ratio {lstsq / ours:,.0f} x)")
    print(f"  fitwatch QR on raw rows (fit_ols)            {qr * 1000:9.1f} ms  "
          f"(ratio {qr / ours:,.0f} x)")
    print(f"  largest relative coefficient difference      {np.max(np.abs(a / b - 1)):.1e}")


if __name__ == "__main__":
    main()
