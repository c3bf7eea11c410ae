"""Benchmark: sup-F over a year of day statistics vs refitting raw rows for every split.

365 days of 2000 rows, one predictor. Ours: :func:`monitor.stats.change.sup_f_test` from the day
statistics (prefix and suffix sums, one small solve per side and split). Baseline, written here
and timed in the same run: for every candidate split, ``numpy.linalg.lstsq`` on the raw rows of
both segments. Both must give the same statistic and location.

Run: ``python tests/benchmarks/bench_supf.py`` (a script; pytest does not collect ``bench_*``
files). It exits with an error if the two statistics or locations differ.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import numpy as np

from monitor.stats.change import sup_f_test, symmetric_candidates
from monitor.stats.moments import DayMoments
from monitor.stats.supf_null import supf_pvalue

DAYS, ROWS = 365, 2000


def _data(seed: int = 2026) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    day = np.repeat(np.arange(DAYS), ROWS)
    x = rng.normal(20.0, 4.0, DAYS)[day] + rng.normal(0.0, 5.0, day.size)
    slope = np.where(day >= 250, 2.13, 2.1)
    y = 12.0 + slope * x + rng.normal(0.0, 6.0, day.size)
    return day, x, y


def _rss_lstsq(x: np.ndarray, y: np.ndarray) -> float:
    design = np.column_stack([np.ones_like(x), x])
    coef = np.linalg.lstsq(design, y, rcond=None)[0]
    resid = y - design @ coef
    return float(resid @ resid)


def baseline(day: np.ndarray, x: np.ndarray, y: np.ndarray,
             candidates: np.ndarray) -> tuple[float, int]:
    """Chow F per split by refitting both segments on raw rows (rows sorted by day)."""
    p = 2
    rss0 = _rss_lstsq(x, y)
    ends = np.searchsorted(day, candidates, side="right")
    path = np.empty(len(candidates))
    for j, end in enumerate(ends):
        rss = _rss_lstsq(x[:end], y[:end]) + _rss_lstsq(x[end:], y[end:])
        path[j] = (rss0 - rss) / p / (rss / (len(y) - 2 * p))
    best = int(np.argmax(path))
    return float(path[best]), int(candidates[best])


def _best_of(repeats: int, run: Callable[[], Any]) -> tuple[float, Any]:
    times, out = [], None
    for _ in range(repeats):
        started = time.perf_counter()
        out = run()
        times.append(time.perf_counter() - started)
    return min(times), out


def main() -> dict[str, float]:
    """Time both ways, print the figures, and check they agree."""
    day, x, y = _data()
    t_stats, days = _best_of(1, lambda: DayMoments.from_rows(day, np.column_stack([x, y])))
    candidates = symmetric_candidates(days.n)
    t_ours, ours = _best_of(3, lambda: sup_f_test(days, candidates))
    t_base, (base_stat, base_loc) = _best_of(1, lambda: baseline(day, x, y, candidates))
    t_p, _ = _best_of(3, lambda: [supf_pvalue(9.0, 2, ours.lambda_bounds) for _ in range(1000)])
    print(f"\n{DAYS} days x {ROWS} rows, 1 predictor, {len(candidates)} candidate splits")
    print(f"  day statistics from raw rows (ingest cost, once): {t_stats:8.3f} s")
    print(f"  sup-F from day statistics:                        {t_ours:8.3f} s")
    print(f"  baseline, lstsq refit per split:                  {t_base:8.3f} s")
    print(f"  ratio baseline / ours:                            {t_base / t_ours:8.0f} x")
    print(f"  p-value lookup:                                   {t_p * 1e3:8.1f} us per call")
    print(f"  statistic ours {ours.statistic:.10g} at day {ours.location}; "
          f"baseline {base_stat:.10g} at day {base_loc}; "
          f"relative difference {abs(ours.statistic / base_stat - 1):.1e}")
    print(f"  p-value {supf_pvalue(ours.statistic, 2, ours.lambda_bounds).text()}")
    if ours.location != base_loc or abs(ours.statistic / base_stat - 1) > 1e-8:
        raise SystemExit("sup-F from day statistics differs from the lstsq baseline")
    return {"ours": t_ours, "baseline": t_base, "ratio": t_base / t_ours}


if __name__ == "__main__":
    main()
