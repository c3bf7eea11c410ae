"""Does the bias chart keep its false-alarm promise when its parameters are estimated?

Run as ``python tests/benchmarks/sim_calibration.py [--windows 1000] [--draws 400]``. Three parts:

1. The promise. Many 60-day fit windows from an invented process with day effects are fitted
   (fit_moments + day_effects_of_fit) and calibrated (calibrate_h); each chart's true in-control
   ARL follows from the true parameters (normal-mixture form, as in the calibration). The share of
   charts reaching the target should be about the guarantee; the same charts with h for known
   parameters, and a naive chart (no tau² in the day scale), are shown for comparison.
2. The normal-mixture approximation. For a few charts, long in-control series of days are
   simulated from the truth, standardized with standardize_days and run through tabular_cusum
   (restarted after each signal, state carried across chunks); the mean run length is compared
   with the predicted ARL, at h for known parameters and at the h whose predicted ARL is the
   target (the calibrated h gives ARLs too long to simulate precisely).
3. The Lucas & Crosier (1982) two-sided combination, by run-length simulation of the standard
   chart.

Invented data throughout (properties, not published values).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.stats.arl import cusum_arl, solve_h
from monitor.stats.calibration import (
    ChartDesign,
    calibrate_h,
    coef_covariance,
    standardize_days,
)
from monitor.stats.cusum import tabular_cusum
from monitor.stats.day_effects import day_effects_of_fit
from monitor.stats.moments import DayMoments
from monitor.stats.ols import fit_moments

B0, B1, TAU, SIGMA_W = 20.0, 2.1, 2.5, 6.0
DAYS, ROWS_PER_DAY, K, TARGET, GUARANTEE = 60, 80, 0.5, 1000.0, 0.90


def future_days(rng: np.random.Generator, count: int) -> tuple[np.ndarray, np.ndarray]:
    return rng.poisson(ROWS_PER_DAY, count).astype(float), rng.uniform(14, 26, count)


def fit_window(rng: np.random.Generator):
    counts = rng.poisson(ROWS_PER_DAY, DAYS)
    day = np.repeat(np.arange(DAYS), counts)
    x = np.repeat(rng.uniform(14, 26, DAYS), counts) + rng.normal(0, 4, counts.sum())
    y = B0 + B1 * x + rng.normal(0, TAU, DAYS)[day] + rng.normal(0, SIGMA_W, counts.sum())
    days = DayMoments.from_rows(day, np.column_stack([x, y]))
    fit = fit_moments(days.total())
    return fit, ChartDesign.from_fit(fit, days, day_effects_of_fit(days, fit.coef))


def chart_scales(design: ChartDesign, n: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, ...]:
    proper = 1.0 / standardize_days(np.ones_like(n), n, x, design)
    rows = np.column_stack([np.ones_like(n), x - design.xmean])
    ols = coef_covariance(design, 0.0, design.sigma_w2)
    naive = np.sqrt(design.sigma_w2 / n + np.einsum("dj,jk,dk->d", rows, ols, rows))
    return proper, naive


def mixture(fit, scale, n, x) -> tuple[float, float]:
    mu = -((fit.coef[0] - B0) + (fit.coef[1] - B1) * x) / scale
    w2 = (TAU**2 + SIGMA_W**2 / n) / scale**2
    mean = float(mu.mean())
    return mean, float(np.sqrt((w2 + mu**2).mean() - mean**2))


def promise(windows: int, draws: int, rng: np.random.Generator) -> list:
    n, x = future_days(rng, 5000)
    h_known = solve_h(K, TARGET)
    rows, charts, cost = [], [], 0.0
    for w in range(windows):
        fit, design = fit_window(rng)
        start = time.perf_counter()
        cal = calibrate_h(design, K, TARGET, GUARANTEE, draws, seed=w)
        cost += time.perf_counter() - start
        proper, naive = chart_scales(design, n, x)
        rows.append((cal.h, cusum_arl(K, cal.h, *mixture(fit, proper, n, x)),
                     cusum_arl(K, h_known, *mixture(fit, proper, n, x)),
                     cusum_arl(K, h_known, *mixture(fit, naive, n, x))))
        if w < 6:
            charts.append((fit, design, cal))
    table = np.array(rows)
    print(f"\n1. The promise: {windows} fit windows of {DAYS} days, ~{ROWS_PER_DAY} rows a day, "
          f"tau = {TAU}, sigma_w = {SIGMA_W}; target ARL {TARGET:g} days, guarantee {GUARANTEE}, "
          f"{draws} bootstrap draws")
    se = np.sqrt(GUARANTEE * (1 - GUARANTEE) / windows)
    print(f"   calibrate_h: {cost / windows * 1000:.0f} ms per window; median h "
          f"{np.median(table[:, 0]):.3f} (h for known parameters {h_known:.3f}); binomial SE of "
          f"the share {se:.3f}")
    print(f"   {'chart':<34}{'share ARL >= target':>20}{'median ARL':>12}{'10 % ARL':>10}")
    for col, name in ((1, "calibrated h (bootstrap)"), (2, "h for known parameters"),
                      (3, "naive: known h, no tau² in scale")):
        arl = table[:, col]
        print(f"   {name:<34}{np.mean(arl >= TARGET):>20.3f}{np.median(arl):>12.1f}"
              f"{np.quantile(arl, 0.1):>10.1f}")
    return charts


def run_lengths(u: np.ndarray, h: float, chunk: int) -> np.ndarray:
    """Run lengths of the two-sided chart restarted at zero after every signal."""
    lengths, pos, start, state = [], 0, 0, None
    while pos < len(u):
        path = tabular_cusum(u[pos:pos + chunk], K, h, state)
        hit = path.first_signal
        if hit is None:
            state, pos = path.state, pos + len(path)
            continue
        pos += hit + 1
        lengths.append(pos - start)
        start, state = pos, None
    return np.array(lengths)


def in_control_series(design: ChartDesign, fit, days: int, rng) -> np.ndarray:
    n, x = future_days(rng, days)
    error = (fit.coef[0] - B0) + (fit.coef[1] - B1) * x
    rbar = rng.normal(0, TAU, days) + rng.normal(0, 1, days) * SIGMA_W / np.sqrt(n) - error
    return standardize_days(rbar, n, x, design)


def mixture_check(charts: list, days: int, rng: np.random.Generator) -> None:
    n, x = future_days(rng, 5000)
    print(f"\n2. Normal-mixture approximation vs simulated run lengths ({days:,} days per line)")
    print(f"   {'chart':>6}{'h':>8}{'predicted ARL':>15}{'simulated':>11}{'SE':>8}{'runs':>7}"
          f"{'ratio':>8}")
    for number, (fit, design, cal) in enumerate(charts):
        proper, _ = chart_scales(design, n, x)
        moments = mixture(fit, proper, n, x)
        # h for known parameters, and the h that this chart's true ARL puts at the target
        for h in (cal.h_known, solve_h(K, TARGET, *moments)):
            predicted = cusum_arl(K, h, *moments)
            u = in_control_series(design, fit, days, rng)
            runs = run_lengths(u, h, chunk=int(min(4 * predicted, 50_000)) + 100)
            mean, se = runs.mean(), runs.std(ddof=1) / np.sqrt(len(runs))
            print(f"   {number:>6}{h:>8.3f}{predicted:>15.1f}{mean:>11.1f}{se:>8.1f}"
                  f"{len(runs):>7}{mean / predicted:>8.3f}")


def lucas_crosier_check(rng: np.random.Generator) -> None:
    print("\n3. Two-sided combination 1/ARL = 1/ARL+ + 1/ARL- (Lucas & Crosier 1982) vs "
          "simulated run lengths")
    print(f"   {'k':>5}{'h':>5}{'shift':>7}{'formula':>10}{'simulated':>11}{'SE':>7}{'z':>7}")
    for k, h, shift, runs in ((0.5, 4.0, 0.0, 100_000), (0.5, 5.0, 0.0, 40_000),
                              (0.5, 4.0, 0.25, 100_000), (0.25, 4.0, 0.0, 100_000),
                              (0.0, 2.0, 0.0, 200_000)):
        upper, lower, length = np.zeros(runs), np.zeros(runs), np.zeros(runs)
        active, t = np.arange(runs), 0
        while active.size:  # all runs advance together, one period per pass
            t += 1
            u = rng.normal(shift, 1.0, active.size)
            upper[active] = np.maximum(0.0, upper[active] + u - k)
            lower[active] = np.maximum(0.0, lower[active] - u - k)
            hit = (upper[active] > h) | (lower[active] > h)
            length[active[hit]] = t
            active = active[~hit]
        formula = cusum_arl(k, h, shift)
        se = length.std(ddof=1) / np.sqrt(runs)
        print(f"   {k:>5}{h:>5}{shift:>7}{formula:>10.2f}{length.mean():>11.2f}{se:>7.2f}"
              f"{(length.mean() - formula) / se:>7.2f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--windows", type=int, default=1000)
    parser.add_argument("--draws", type=int, default=400)
    parser.add_argument("--days", type=int, default=2_000_000, help="days per simulated series")
    parser.add_argument("--seed", type=int, default=20240611)
    args = parser.parse_args()
    rng = np.random.default_rng(args.seed)
    start = time.perf_counter()
    charts = promise(args.windows, args.draws, rng)
    mixture_check(charts, args.days, rng)
    lucas_crosier_check(rng)
    print(f"\ntotal {time.perf_counter() - start:.0f} s")


if __name__ == "__main__":
    main()
