"""False alarms and detection delays of the production day loop on data that depart from it.

    python3 tests/benchmarks/sim_departures.py [--quick] [--models N] [--days N]
        [--cases a,b] [--changes a,b] [--label NAME | --out PATH] [--processes 2]
    python3 tests/benchmarks/sim_departures.py --combine PART.json ... --label NAME

For every case of ``departures.py`` and every simulated model: generate 60 fit days and the
monitored days, fit the version and walk the days with
:func:`monitor.monitoring.replay.replay_arrays` (``fit_window`` -> draft -> in-memory version ->
``walk``, the code the nightly check and ``fitwatch replay`` run), default settings, every
``refit`` acknowledged the next day so that false alarms can be counted.

In control (``--days`` monitored days, default 500): false ``refit`` episodes (runs of
consecutive ``refit`` days) per 1000 model-days with Garwood's exact Poisson 95 % interval,
the share of days on ``watch``, ``watch`` entries per 1000 model-days, and which signals started
the false episodes and the watch entries. A model-day is a calendar day the walk checked (a
closed Sunday counts). Change variants (60 in-control monitored days, then the pallet slope
changes; ``--change-days`` monitored days after that): the delay to the first ``refit`` on or
after the change day (flagged on the change day = 1), its median, 90th percentile and the
share of models not caught within 100 days; ``refit`` days before the change are reported as
false alarms and do not count as detection.

Results go to ``tests/benchmarks/results/departures_<label>.json`` and ``.txt``.
"""

from __future__ import annotations

import os
import sys

if __name__ == "__main__":  # before numpy loads its BLAS: tiny solves are slower with threads
    for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[_var] = "1"

import argparse
import json
import platform
import subprocess
import time
from collections import Counter
from dataclasses import dataclass, replace
from datetime import UTC, datetime, timedelta
from multiprocessing import Pool
from pathlib import Path

import numpy as np
from scipy.stats import chi2

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from monitor.config import CheckSettings, ModelSettings, Settings  # noqa: E402
from monitor.domain.check import Carry, DayCheck  # noqa: E402
from monitor.domain.model import ModelSpec  # noqa: E402
from monitor.domain.status import Status  # noqa: E402
from monitor.domain.version import Version  # noqa: E402
from monitor.monitoring.context import VersionContext  # noqa: E402
from monitor.monitoring.replay import replay_arrays  # noqa: E402
from monitor.monitoring.walk import Subject, Timeline, walk  # noqa: E402
from tests.benchmarks.departures import (  # noqa: E402
    CASES,
    CHANGES,
    DEFAULT_CHANGES,
    FIT_DAYS,
    Case,
    Change,
    Sample,
    simulate,
)

NOW = datetime(2030, 1, 1, tzinfo=UTC)
RESULTS = Path(__file__).resolve().parent / "results"
CAUGHT_WITHIN = 100  # days after the change
PERIOD = 100  # false refits are also counted per 100 monitored days (days 1-100, 101-200, ...)
BLOCK_DAYS = 7  # changed days are walked a week at a time, to stop soon after the first refit
QUICK_CASES = ("textbook", "ar1_0.5", "t3", "outliers_2", "weekly", "combined")
QUICK_CHANGES = ("step_10",)
# a sorting hub's volume: slow to simulate (20 models x 180 days of these two and rows_1000
# took 31 min on 2 processes), so they run only when named (--cases rows_30000,hub_combined)
HUB_CASES = tuple(name for name, case in CASES.items() if case.rows > 10000)


@dataclass(frozen=True)
class Job:
    case: str
    model: int
    days: int  # monitored days in control (at least as many as precede any change)
    changes: tuple[Change, ...]
    change_days: int  # monitored days after a change, at most
    check: tuple[tuple[str, float], ...] = ()  # CheckSettings overrides (--check KEY=VALUE)


@dataclass(frozen=True)
class Caught:
    """A change variant of one model: days from the change to the first refit, if any."""

    delay: int | None  # change day = 1
    signals: tuple[str, ...]  # the refit-level findings on that day
    statuses: str  # the days walked from the change day on, a letter each as in Walked


@dataclass(frozen=True)
class Walked:
    """One simulated model's walks, reduced to what the summary needs."""

    job: Job
    statuses: str  # in control: one letter a checked day: o(k), w(atch), r(efit)
    refit_starts: tuple[tuple[int, tuple[str, ...]], ...]  # (index, refit-level signals)
    watch_starts: tuple[tuple[int, tuple[str, ...]], ...]  # (index, watch-level signals)
    changes: dict[str, Caught]
    false_before_change: bool  # a refit in the in-control days before the change
    h: float
    cpu_seconds: float


def spec_for(case: Case) -> ModelSpec:
    return ModelSpec("dock", "load_minutes", case.predictors, "docked_at")


def run_job(job: Job) -> Walked:
    """Fit and walk one model in control; then each change variant from the change day on."""
    began = time.process_time()
    case = CASES[job.case]
    after = max((c.after for c in job.changes), default=0)
    world = simulate(case, job.model, max(job.days, after + job.change_days))
    world = world.from_day(FIT_DAYS - case.fit_days)  # the fit window's first day on
    calm = world.through(job.days)
    settings = Settings().for_model("dock")
    if job.check:
        settings = replace(settings, check=replace(settings.check, **dict(job.check)))
    spec = spec_for(case)
    fitted, version, checks = replay_arrays(spec, settings, calm.days, calm.x, calm.y,
                                            calm.fit_end, acknowledge_refits=True, now=NOW)
    caught, false_before = {}, False
    for change in job.changes:
        moved = world.with_change(change).through(change.after + job.change_days)
        before = [c for c in checks if c.day < change.day]
        false_before = false_before or any(c.status == Status.REFIT for c in before)
        caught[change.name] = _walk_changed(spec, settings, version, moved, before,
                                            change, job.change_days)
    letters = "".join(_letter(c) for c in checks)
    return Walked(job, letters, tuple(_starts(checks, Status.REFIT)),
                  tuple(_starts(checks, Status.WATCH)), caught, false_before,
                  float(fitted.calibration.h), time.process_time() - began)


def _walk_changed(spec: ModelSpec, settings: ModelSettings, version: Version, sample: Sample,
                  before: list[DayCheck], change: Change, most: int) -> Caught:
    """Walk the changed days in blocks until the first refit, as the nights resume.

    The days before the change are the in-control walk's (the same rows), so the walk resumes
    on the change day from the last check before it exactly as the nightly check resumes from
    stored checks (``Carry.after`` with the coverage window's days); it stops at the first
    refit or after ``most`` days.
    """
    window = settings.check.coverage_window_days
    previous = before[-1]
    recent = tuple(c.coverage_day for c in before
                   if c.day > change.day - timedelta(days=window))
    carry = Carry.after(previous, recent)
    timeline = Timeline.from_rows(sample.days, sample.x, sample.y)
    subject = Subject(0, spec.name, spec.response, settings)
    contexts: dict[int, VersionContext] = {}
    last = change.day + timedelta(days=most - 1)
    day, letters = change.day, ""
    while day <= last:
        block_end = min(last, day + timedelta(days=BLOCK_DAYS - 1))
        done, carry = walk(subject, [version], timeline, day, block_end, carry, now=NOW,
                           acknowledge_refits=True, contexts=contexts)
        for c in done:
            letters += _letter(c)
            if c.status == Status.REFIT:
                delay = (c.day - change.day).days + 1
                signals = tuple(sorted({f"{f.signal} {f.kind}" for f in c.details.findings
                                        if f.level == Status.REFIT}))
                return Caught(delay, signals, letters)
        day = block_end + timedelta(days=1)
    return Caught(None, (), letters)


def _letter(check: DayCheck) -> str:
    return {Status.OK: "o", Status.WATCH: "w", Status.REFIT: "r"}[check.status]


def _starts(checks: tuple[DayCheck, ...], status: Status
            ) -> list[tuple[int, tuple[str, ...]]]:
    """The first day of each run of ``status`` and the signals found at that level on it."""
    out = []
    previous = None
    for i, c in enumerate(checks):
        if c.status == status and previous != status:
            signals = tuple(sorted({f"{f.signal} {f.kind}" for f in c.details.findings
                                    if f.level == status}))
            out.append((i, signals or ("held",)))
        previous = c.status
    return out


# summaries ------------------------------------------------------------------------------------
def garwood(count: int, exposure: float, level: float = 0.95) -> tuple[float, float]:
    """Exact interval for a Poisson rate: ``count`` events in ``exposure`` units (Garwood 1936).

    Lower ``chi2(alpha/2; 2k)/2``, upper ``chi2(1 - alpha/2; 2k + 2)/2``, per unit of exposure.
    """
    alpha = 1.0 - level
    lower = 0.0 if count == 0 else chi2.ppf(alpha / 2, 2 * count) / 2
    upper = chi2.ppf(1 - alpha / 2, 2 * count + 2) / 2
    return float(lower / exposure), float(upper / exposure)


def in_control_summary(walks: list[Walked]) -> dict[str, object]:
    model_days = sum(len(w.statuses) for w in walks)
    episodes = sum(len(w.refit_starts) for w in walks)
    entries = sum(len(w.watch_starts) for w in walks)
    watch_days = sum(w.statuses.count("w") for w in walks)
    low, high = garwood(episodes, model_days / 1000.0)
    started = Counter(s for w in walks for _, signals in w.refit_starts for s in signals)
    watch_by = Counter(s for w in walks for _, signals in w.watch_starts for s in signals)
    by_period = Counter(i // PERIOD for w in walks for i, _ in w.refit_starts)
    periods = max(len(w.statuses) for w in walks) // PERIOD
    return {
        "models": len(walks), "model_days": model_days,
        "false_refit_episodes": episodes,
        "false_refits_per_1000": 1000.0 * episodes / model_days,
        "false_refits_ci95": [low, high],
        "models_with_false_refit": sum(bool(w.refit_starts) for w in walks),
        "watch_share": watch_days / model_days,
        "watch_entries": entries,
        "watch_entries_per_1000": 1000.0 * entries / model_days,
        "refits_started_by": dict(started.most_common()),
        "false_refits_by_period": [by_period.get(p, 0) for p in range(periods)],
        "watch_entered_by": dict(watch_by.most_common()),
        "h_median": float(np.median([w.h for w in walks])),
    }


def change_summary(walks: list[Walked], change: str, most: int) -> dict[str, object]:
    caught = [w.changes[change] for w in walks]
    d = np.array([np.inf if c.delay is None else c.delay for c in caught], dtype=float)
    by = Counter(s for c in caught for s in c.signals)
    return {
        "models": len(walks), "days_after_change": most,
        "median_delay": _quantile(d, 0.5), "p90_delay": _quantile(d, 0.9),
        "not_caught_within_100": (float(np.mean(d > CAUGHT_WITHIN))
                                  if most >= CAUGHT_WITHIN else None),
        "never_caught": int(np.isinf(d).sum()),
        "models_false_refit_before_change": sum(w.false_before_change for w in walks),
        "caught_by": dict(by.most_common()),
        "delays": [None if np.isinf(v) else int(v) for v in d],
    }


def _quantile(values: np.ndarray, q: float) -> float | None:
    """A quantile of delays in which a model never caught counts as infinitely late."""
    value = float(np.quantile(values, q, method="inverted_cdf"))
    return None if np.isinf(value) else value


# output ---------------------------------------------------------------------------------------
def table(results: dict[str, dict[str, object]], meta: dict[str, object]) -> str:
    """The results as plain-text tables."""
    lines = [f"fitwatch departures benchmark '{meta['label']}' (code {meta['commit']}, "
             f"{meta['date']})",
             f"In control: {meta['days']} monitored days after a {meta['fit_days']}-day fit "
             f"window, {meta['models']} models per case"
             + "".join(f" ({k}: {v})" for k, v in meta["models_for"].items())
             + "; " + (", ".join(f"{k} = {v}" for k, v in meta.get("check", {}).items())
                       or "default settings") + "; every refit acknowledged the next day.",
             "", f"{'case':15s} {'model-days':>10s}  {'false refits/1000 [95% CI]':27s} "
             f"{'models':>7s} {'watch':>6s} {'entries/1000':>12s}  false refits started by"]
    for name, r in results.items():
        c = r["in_control"]
        low, high = c["false_refits_ci95"]
        started = ", ".join(f"{k} {v}" for k, v in c["refits_started_by"].items()) or "-"
        rate = f"{c['false_refits_per_1000']:.2f} [{low:.2f}-{high:.2f}]"
        lines.append(
            f"{name:15s} {c['model_days']:>10,d}  {rate:27s} "
            f"{c['models_with_false_refit']:>3d}/{c['models']:<3d} "
            f"{100 * c['watch_share']:5.1f}% {c['watch_entries_per_1000']:>12.1f}  {started}")
    lines += ["", f"False refit episodes by monitored days (1-{PERIOD}, {PERIOD + 1}-{2 * PERIOD}, "
              "...), all models of the case"]
    for name, r in results.items():
        periods = r["in_control"].get("false_refits_by_period")
        counts = " ".join(f"{n:4d}" for n in periods) if periods is not None else "(not counted)"
        lines.append(f"{name:15s} {counts}")
    lines += ["", "Watch entered by (in control; a day can name several signals)"]
    for name, r in results.items():
        by = ", ".join(f"{k} {v}" for k, v in r["in_control"]["watch_entered_by"].items())
        lines.append(f"{name:15s} {by or '-'}")
    changes = list(meta["changes"])
    if changes:
        most = meta["change_days"]
        afters = sorted({CHANGES[n].after for n in changes if n in CHANGES})
        when = " or ".join(map(str, afters)) if afters else "60"
        lines += ["", f"Detection: the pallet slope changes after {when} in-control monitored "
                  "days (the change's name says when it is not 60); days to the first refit "
                  f"(change day = 1), walked up to {most} days after the change.",
                  "Cells: median / 90th percentile / share not caught within 100 days; "
                  "models with a false refit before the change in the last column.",
                  f"{'case':15s} " + " ".join(f"{n:>19s}" for n in changes)
                  + f" {'false before':>13s}"]
        for name, r in results.items():
            cells = []
            for n in changes:
                c = r[n]
                missed = c["not_caught_within_100"]
                cells.append(f"{_days(c['median_delay'], most):>6s} / "
                             f"{_days(c['p90_delay'], most):>4s} / "
                             + ("n/a" if missed is None else f"{100 * missed:3.0f}%"))
            first = r[changes[0]]
            lines.append(f"{name:15s} " + " ".join(f"{c:>19s}" for c in cells)
                         + f" {first['models_false_refit_before_change']:>6d}/{first['models']}")
    timed = meta["cpu_seconds_by_case"]
    cpu = f"{sum(timed.values()):.0f} CPU s in the walks"
    if len(timed) < len(results):
        cpu += f" of {', '.join(timed)}"
    lines += ["", f"run time {meta['seconds']:.0f} s with {meta['processes']} processes, "
              f"{cpu} ({meta['machine']})"]
    lines += [f"note: {n}" for n in meta.get("notes", ())]
    return "\n".join(lines) + "\n"


def _days(value: float | None, most: int) -> str:
    return f">{most}" if value is None else f"{value:.0f}"


def _commit() -> str:
    try:
        out = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT,
                             capture_output=True, text=True, check=True)
        dirty = subprocess.run(["git", "status", "--porcelain", "monitor"], cwd=ROOT,
                               capture_output=True, text=True, check=True).stdout.strip()
        return out.stdout.strip() + ("+changes" if dirty else "")
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true",
                        help="8 models x 300 days, cases " + ",".join(QUICK_CASES)
                        + ", change " + ",".join(QUICK_CHANGES))
    parser.add_argument("--models", type=int, help="models per case (default 40; quick 8)")
    parser.add_argument("--days", type=int, help="monitored in-control days (default 500; "
                        "quick 300)")
    parser.add_argument("--change-days", type=int, default=None,
                        help="monitored days after a change (default 200; quick 100)")
    parser.add_argument("--cases", help="comma-separated: " + ",".join(CASES))
    parser.add_argument("--changes", help="comma-separated: " + ",".join(CHANGES)
                        + " (or 'none')")
    parser.add_argument("--models-for", action="append", default=[], metavar="CASE=N",
                        help="fewer (or more) models for one case, e.g. rows_1000=20")
    parser.add_argument("--label", help="results go to results/departures_LABEL.{json,txt}")
    parser.add_argument("--out", type=Path, help="results path without suffix (overrides "
                        "--label)")
    parser.add_argument("--processes", type=int, default=2)
    parser.add_argument("--check", action="append", default=[], metavar="KEY=VALUE",
                        help="a check setting other than its default, e.g. "
                        "slope_chart_step=0.05 (to compare tunings)")
    parser.add_argument("--combine", nargs="+", type=Path, metavar="JSON",
                        help="combine the results of runs of different cases into one "
                        "(written as --label / --out)")
    args = parser.parse_args(argv)

    models = args.models or (8 if args.quick else 40)
    days = args.days or (300 if args.quick else 500)
    change_days = args.change_days or (100 if args.quick else 200)
    cases = _pick(args.cases, QUICK_CASES if args.quick
                  else tuple(c for c in CASES if c not in HUB_CASES), CASES, "case")
    changes = () if args.changes == "none" else _pick(
        args.changes, QUICK_CHANGES if args.quick else DEFAULT_CHANGES, CHANGES, "change")
    per_case = {}
    for item in args.models_for:
        name, _, count = item.partition("=")
        if name not in CASES or not count.isdigit():
            parser.error(f"--models-for wants CASE=N with a case of: {', '.join(CASES)}")
        per_case[name] = int(count)
    check = []
    for item in args.check:
        name, _, value = item.partition("=")
        if name not in CheckSettings.__dataclass_fields__:
            parser.error(f"--check: no check setting {name!r}")
        default = getattr(CheckSettings(), name)
        try:
            check.append((name, type(default)(value)))
        except ValueError:
            parser.error(f"--check {name}: not a {type(default).__name__}: {value!r}")
    label = args.label or ("quick" if args.quick else "full")
    out = args.out or RESULTS / f"departures_{label}"
    if args.combine:
        results, meta = combine(args.combine, label)
        return _write(results, meta, out)

    if changes and days < max(CHANGES[c].after for c in changes):
        parser.error("--days must cover the in-control days before a change")
    jobs = [Job(case, m, days, tuple(CHANGES[c] for c in changes), change_days, tuple(check))
            for case in cases for m in range(per_case.get(case, models))]
    began = time.perf_counter()
    walks: list[Walked] = []
    with Pool(args.processes) as pool:
        for i, walked in enumerate(pool.imap_unordered(run_job, jobs, chunksize=1), 1):
            walks.append(walked)
            if i % 20 == 0 or i == len(jobs):
                print(f"  {i}/{len(jobs)} models walked ({time.perf_counter() - began:.0f} s)",
                      file=sys.stderr, flush=True)
    seconds = time.perf_counter() - began

    results: dict[str, dict[str, object]] = {}
    timing: dict[str, float] = {}
    for case in cases:
        mine = sorted((w for w in walks if w.job.case == case), key=lambda w: w.job.model)
        timing[case] = round(sum(w.cpu_seconds for w in mine), 1)
        results[case] = {"in_control": in_control_summary(mine)}
        for change in changes:
            results[case][change] = change_summary(mine, change, change_days)
    meta = {"label": label, "commit": _commit(), "date": datetime.now(UTC).date().isoformat(),
            "models": models, "models_for": {c: n for c, n in per_case.items() if c in cases},
            "days": days, "change_days": change_days, "fit_days": FIT_DAYS,
            "cases": {c: CASES[c].description for c in cases}, "changes": list(changes),
            "check": dict(check), "seconds": seconds, "cpu_seconds_by_case": timing,
            "processes": args.processes,
            "machine": f"{platform.machine()}, Python {platform.python_version()}"}
    return _write(results, meta, out)


def _write(results: dict[str, dict[str, object]], meta: dict[str, object], out: Path) -> int:
    text = table(results, meta)
    out.parent.mkdir(parents=True, exist_ok=True)
    # suffixes appended, not swapped: a label such as "ar1_0.5" has a dot of its own
    as_json, as_text = (out.parent / f"{out.name}{suffix}" for suffix in (".json", ".txt"))
    as_json.write_text(json.dumps({"meta": meta, "results": results}, indent=1) + "\n")
    as_text.write_text(text)
    print(text)
    print(f"written: {as_json}, {as_text}")
    return 0


def combine(paths: list[Path], label: str) -> tuple[dict[str, dict[str, object]],
                                                      dict[str, object]]:
    """One result from runs of different cases on the same code and with the same design.

    A machine shared with others rarely has an hour in one piece; the cases are independent,
    so running them in parts and combining changes nothing. The parts must agree on the
    design and have run on the same ``monitor/`` tree (without uncommitted changes).
    """
    parts = [json.loads(Path(p).read_text()) for p in paths]
    design = ("models", "days", "change_days", "fit_days", "changes", "check")
    first = parts[0]["meta"]
    for path, part in zip(paths, parts, strict=True):
        meta = part["meta"]
        differ = [k for k in design if meta.get(k, {}) != first.get(k, {})]
        if differ:
            raise SystemExit(f"{path}: {', '.join(differ)} differ from {paths[0]}")
    trees = {_monitor_tree(p["meta"]["commit"]) for p in parts}
    if len(trees) != 1 or None in trees:
        raise SystemExit("the parts ran on different (or uncommitted) monitor/ code: "
                         + ", ".join(p["meta"]["commit"] for p in parts))
    results: dict[str, dict[str, object]] = {}
    meta = {k: first.get(k, {}) for k in design}
    meta |= {"label": label, "commit": ", ".join(dict.fromkeys(p["meta"]["commit"]
                                                                for p in parts)),
             "date": max(p["meta"]["date"] for p in parts), "models_for": {}, "cases": {},
             "seconds": 0.0, "cpu_seconds_by_case": {}, "processes": first["processes"],
             "machine": first["machine"], "parts": [str(p) for p in paths],
             "notes": [f"{path.name}: {p['meta']['note']}"
                       for path, p in zip(paths, parts, strict=True) if "note" in p["meta"]]}
    for part in parts:
        for case, result in part["results"].items():
            if case in results:
                raise SystemExit(f"case {case} is in more than one part")
            results[case] = result
        for key in ("models_for", "cases", "cpu_seconds_by_case"):
            meta[key] |= part["meta"][key]
        meta["seconds"] += part["meta"]["seconds"]
    order = [c for c in CASES if c in results]
    return {c: results[c] for c in order}, meta


def _monitor_tree(commit: str) -> str | None:
    """The git tree of ``monitor/`` at a recorded commit (None: uncommitted changes)."""
    if "+" in commit:
        return None
    try:
        return subprocess.run(["git", "rev-parse", f"{commit}:monitor"], cwd=ROOT,
                              capture_output=True, text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return None


def _pick(given: str | None, default: tuple[str, ...], known: dict[str, object],
          what: str) -> tuple[str, ...]:
    if not given:
        return default
    names = tuple(n.strip() for n in given.split(",") if n.strip())
    unknown = [n for n in names if n not in known]
    if unknown:
        raise SystemExit(f"unknown {what}(s): {', '.join(unknown)}; known: {', '.join(known)}")
    return names


if __name__ == "__main__":
    raise SystemExit(main())
