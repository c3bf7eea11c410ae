"""How precise is one day's slope under each rule for rows far off their day's line, and do the
within-day slope chart's standardized days keep unit scale under both?

    python3 tests/benchmarks/slope_rows.py [--models 6] [--days 300] [--cases a,b]

For every case of ``departures.py`` and every simulated model: the production fit of its fit
window (``monitor.lifecycle.fit.fit_window``), the fit window's diagnosis made once per rule
(``diagnose_window(..., slope_row_rule=...)``: the noise ratio and the reference's shift are
computed for that rule), the chart of each (``monitor.monitoring.context.slope_chart_of``,
default settings), and then every in-control monitored day through ``slope_step``: the day's
slope deviation from the reference and its standardized value ``z`` (against the fit window's
reference, nothing learned). Printed per case and rule: the sd of the day slopes as a share of
the pallet slope (lower is more precise; the rules' ratio of variances is what a chart's delay
scales with, roughly), the mean of ``z`` (a bias reads as a change in one direction) and its
variance (1 when the chart's variance is right; above 1 a chart that cries wolf, below 1 one
that is slow). Last, for the rule in use (``SLOPE_ROW_RULE``), the mean over models of the chart's
between-day variance ``tau²`` as a share of a day slope's within-day variance (mean over the
monitored days): 0 is the truth in every case but ``random_slope``.
"""

from __future__ import annotations

import argparse
import os
import sys

if __name__ == "__main__":  # before numpy loads its BLAS: tiny solves are slower with threads
    for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[_var] = "1"

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from departures import B1, CASES, FIT_DAYS, simulate

from monitor.config import Settings
from monitor.lifecycle.fit import diagnose_window, fit_window
from monitor.monitoring.context import slope_chart_of
from monitor.stats.window_summary import SLOPE_ROW_RULE, SLOPE_ROW_RULES
from monitor.stats.within_slope import slope_step


def measure(case_name: str, models: int, days: int
            ) -> tuple[dict[str, tuple[float, float, float]], float]:
    """Per rule: (sd of the day slopes as a share of B1, mean z, variance of z); and the mean
    share tau² / within-day variance of the rule in use."""
    case = CASES[case_name]
    check = Settings().for_model("dock").check
    dev: dict[str, list[float]] = {rule: [] for rule in SLOPE_ROW_RULES}
    z: dict[str, list[float]] = {rule: [] for rule in SLOPE_ROW_RULES}
    between: list[float] = []
    for model in range(models):
        world = simulate(case, model, days).from_day(FIT_DAYS - case.fit_days)
        fit_rows = world.day_index < FIT_DAYS
        x, y, row_days = world.x[fit_rows], world.y[fit_rows], world.days[fit_rows]
        fitted = fit_window(x, y, row_days, case.predictors, check.level, check)
        assert fitted.diagnosis is not None
        later = world.from_day(FIT_DAYS)
        index = later.day_index
        bounds = np.flatnonzero(np.diff(index)) + 1
        for rule in SLOPE_ROW_RULES:
            diagnosis = diagnose_window(fitted.fit, fitted.days, row_days, x, y, fitted.effects,
                                        fitted.diagnosis.fit_coverage, slope_row_rule=rule)
            chart = slope_chart_of(fitted.days, diagnosis, check)
            if chart is None:
                continue
            within: list[float] = []
            for part_x, part_y in zip(np.split(later.x, bounds), np.split(later.y, bounds),
                                      strict=True):
                step = slope_step(chart, part_x, part_y)
                if step is not None and np.isfinite(step.z[0]):
                    dev[rule].append(step.deviation[0])
                    z[rule].append(step.z[0])
                    within.append(step.variance[0] - float(chart.tau2[0]))
            if rule == SLOPE_ROW_RULE and within:
                between.append(float(chart.tau2[0]) / float(np.mean(within)))
    return ({rule: (float(np.std(dev[rule]) / B1), float(np.mean(z[rule])),
                    float(np.var(z[rule]))) for rule in SLOPE_ROW_RULES if z[rule]},
            float(np.mean(between)) if between else float("nan"))


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--models", type=int, default=6)
    parser.add_argument("--days", type=int, default=300, help="in-control monitored days")
    parser.add_argument("--cases", help="comma-separated: " + ",".join(CASES))
    args = parser.parse_args()
    cases = args.cases.split(",") if args.cases else list(CASES)
    print(f"day slopes of in-control days, {args.models} models x {args.days} days a case; "
          "sd as a share of the pallet slope, z against the fit window's reference")
    print(f"{'case':15s} " + "  ".join(f"{rule + ' sd':>8s} {'mean z':>7s} {'var z':>6s}"
                                        for rule in SLOPE_ROW_RULES)
          + "  var drop/clip  tau2/within")
    for name in cases:
        found, between = measure(name, args.models, args.days)
        cells = "  ".join(f"{found[r][0] * 100:7.2f}% {found[r][1]:+7.3f} {found[r][2]:6.3f}"
                          for r in SLOPE_ROW_RULES)
        ratio = (found["drop"][0] / found["clip"][0]) ** 2
        print(f"{name:15s} {cells}  {ratio:13.3f}  {between:11.3f}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
