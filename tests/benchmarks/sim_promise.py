"""The decision policy's promise, measured by simulation with day effects.

    python tests/benchmarks/sim_promise.py [--seeds 60] [--days 1000] [--delay-seeds 100]

Each simulated model is fitted on 60 days and then checked every day with the production day
loop (:func:`monitor.monitoring.walk.walk`, the same code the nightly check runs), every refit
acknowledged the next day so that false alarms can be counted. Data:
``y = 9 + 2.1 x + a_day + e`` with about 78 rows a day, x around 22 (4..33), day shocks
``a ~ N(0, 2.5²)`` and row noise ``e ~ N(0, 5²)``: the demo scenario's noise level. Targets: at
most one false ``refit`` episode per 1000 model-days in control; a 10 % slope change flagged
within a median of 7 days. The same data go through a naive chart as well (no day effects in
the standardization, the coverage test or the slope test; the CUSUM limit chosen as if the
estimates were exact).
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace
from datetime import UTC, date, datetime, timedelta
from multiprocessing import Pool
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.config import Settings, parse_settings
from monitor.lifecycle.fit import fit_window
from monitor.monitoring.evaluate import Carry, VersionContext
from monitor.monitoring.replay import in_memory_version
from monitor.monitoring.walk import Subject, Timeline, walk
from monitor.stats.arl import solve_h
from monitor.stats.calibration import ChartDesign

FIT_DAYS = 60
START = date(2025, 1, 1)
NOW = datetime(2030, 1, 1, tzinfo=UTC)
SETTINGS = Settings()
CHECK = SETTINGS.check
SUBJECT = Subject(0, "sim", "y", SETTINGS.for_model("sim"))


def simulate(rng: np.random.Generator, days: int, change_day: int | None,
             slope_change: float, tau: float = 2.5, sigma: float = 5.0,
             rows: float = 78.0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    counts = rng.poisson(rows, days)
    day_index = np.repeat(np.arange(days), counts)
    x = np.clip(np.rint(rng.normal(22.0, 7.0, day_index.size)), 4, 33)
    slope = np.full(day_index.size, 2.1)
    if change_day is not None:
        slope[day_index >= change_day] *= 1.0 + slope_change
    y = 9.0 + slope * x + rng.normal(0, tau, days)[day_index] + rng.normal(0, sigma, x.size)
    labels = np.datetime64(START, "D") + day_index
    return labels, x[:, None], y


def naive_context(ctx: VersionContext) -> VersionContext:
    """The same version as a chart that ignores day effects and estimation error."""
    d, s2 = ctx.design, ctx.model.s ** 2
    design = ChartDesign(counts=d.counts, rows=d.rows, a=d.a, b=d.b, xmean=d.xmean, tau2=0.0,
                         sigma_w2=s2, n0=d.n0, n_rows=d.n_rows, n_days=d.n_days)
    return replace(ctx, design=design, h=solve_h(CHECK.cusum_k, CHECK.cusum_arl_days),
                   day_effects=False, dispersion=1.0, slope_chart=None, rhythm=None,
                   learn_base=None)


def run_one(args: tuple[int, int, int | None, float]) -> dict[str, list[str]]:
    seed, monitor_days, change_at, change = args
    rng = np.random.default_rng(seed)
    labels, x, y = simulate(rng, FIT_DAYS + monitor_days,
                            None if change_at is None else FIT_DAYS + change_at, change)
    fit = labels < np.datetime64(START, "D") + FIT_DAYS
    fitted = fit_window(x[fit], y[fit], labels[fit], ("x",), CHECK.level, CHECK)
    version = in_memory_version(fitted.draft(CHECK.level), NOW)
    timeline = Timeline.from_rows(labels, x, y)
    ctx = VersionContext.build(version, CHECK)
    out = {}
    first = version.active_from
    last = START + timedelta(days=FIT_DAYS + monitor_days - 1)
    for name, context in (("calibrated", ctx), ("naive", naive_context(ctx))):
        checks, _ = walk(SUBJECT, [version], timeline, first, last, Carry.initial(), now=NOW,
                         acknowledge_refits=True, contexts={version.id: context})
        out[name] = [c.status for c in checks]
    out["h"] = [f"{ctx.h:.3f}"]
    return out


def episodes(statuses: list[str]) -> int:
    count, previous = 0, "ok"
    for s in statuses:
        if s == "refit" and previous != "refit":
            count += 1
        previous = s
    return count


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=60, help="in-control models")
    parser.add_argument("--days", type=int, default=1000, help="monitored days per model")
    parser.add_argument("--delay-seeds", type=int, default=100, help="models per slope change")
    parser.add_argument("--processes", type=int, default=2)
    parser.add_argument("--guarantee", type=float, default=None,
                        help="override check.guarantee (default: the built-in setting)")
    args = parser.parse_args()
    if args.guarantee is not None:
        global SETTINGS, CHECK, SUBJECT
        SETTINGS = parse_settings({"check": {"guarantee": args.guarantee}})
        CHECK = SETTINGS.check
        SUBJECT = Subject(0, "sim", "y", SETTINGS.for_model("sim"))
    print(f"settings: guarantee {CHECK.guarantee}, cusum_arl_days {CHECK.cusum_arl_days}, "
          f"refit_pvalue {CHECK.refit_pvalue}")
    began = time.perf_counter()
    with Pool(args.processes) as pool:
        calm = pool.map(run_one, [(1000 + s, args.days, None, 0.0) for s in range(args.seeds)])
        delays = {}
        for change in (0.05, 0.10, 0.20):
            jobs = [(5000 + s, 30 + 60, 30, change) for s in range(args.delay_seeds)]
            delays[change] = pool.map(run_one, jobs)
    model_days = args.seeds * args.days
    print(f"in control: {args.seeds} models x {args.days} days = {model_days:,} model-days")
    hs = [float(r["h"][0]) for r in calm]
    print(f"  calibrated h: median {np.median(hs):.2f} (range {min(hs):.2f}..{max(hs):.2f})")
    for name in ("calibrated", "naive"):
        eps = [episodes(r[name]) for r in calm]
        watch = sum(s == "watch" for r in calm for s in r[name])
        rate = 1000 * sum(eps) / model_days
        se = 1000 * np.sqrt(sum(eps)) / model_days
        print(f"  {name:10s}: {sum(eps)} false refit episodes = {rate:.2f} per 1000 model-days "
              f"(± {se:.2f}); models with any: {sum(e > 0 for e in eps)}/{args.seeds}; "
              f"watch days {100 * watch / model_days:.1f} %")
    print("slope change at day 30 after the fit, delay to the first refit (days, day 0 = the "
          "first changed day):")
    for change, results in delays.items():
        for name in ("calibrated", "naive"):
            found = []
            for r in results:
                statuses = r[name]
                before = statuses[:30]
                hits = [i - 30 for i, s in enumerate(statuses) if s == "refit" and i >= 30]
                if "refit" in before:
                    hits = hits  # a false alarm before the change does not count as detection
                found.append(hits[0] if hits else np.inf)
            found = np.array(found, dtype=float)
            caught = np.isfinite(found)
            q = np.percentile(found[caught], [25, 50, 75]) if caught.any() else [np.nan] * 3
            print(f"  +{change:.0%} {name:10s}: median {np.median(found):.0f} days "
                  f"(quartiles {q[0]:.0f}..{q[2]:.0f} among caught), caught within 60 days: "
                  f"{caught.mean():.0%}")
    print(f"({time.perf_counter() - began:.0f} s)")


if __name__ == "__main__":
    main()
