"""Does a check cost the same per row at 300 and at 30 000 rows a day? (issue 14, item 0)

    python tests/benchmarks/bench_misses_volume.py [--rows 300,3000,6000,12000,30000]
        [--fit-days 60] [--days 14] [--repeats 2] [--budget 900]

For each volume: one SQLite database with one model fitted on ``--fit-days`` days, then
``--days`` more days ingested (generated like the demo, Poisson day sizes around the volume; the
same generator as bench_night.py). Timed: ``run_checks`` over those days (one block of the real
nightly check code path, which tests each day's coverage window against the law of misses),
best of ``--repeats`` runs, each on a fresh copy of the database. Also shown: the part of that
time spent in ``MissLaw.pvalues`` (measured by wrapping it; the wrapper only times).

Goal: 30 000 rows a day cost at most about ten times 3 000 rows a day (the printed ratio
``t(30 000) / (10 x t(3 000)) <= ~1``). A run that exceeds ``--budget`` seconds is stopped and
reported as "> budget" (the law of misses used to take more than 15 CPU-minutes at 30 000).
"""

from __future__ import annotations

import argparse
import shutil
import signal
import sys
import tempfile
import time
from datetime import timedelta
from pathlib import Path
from types import FrameType

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_night import START, frame, now_after, settings_for

from monitor.ingest.service import ingest_file, options_for
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.monitoring.check import run_checks
from monitor.stats import misses
from monitor.store.engine import open_engine
from monitor.store.migrate import init_database
from monitor.store.models import get_model


class OverBudget(BaseException):  # not an Exception: the check loop must not swallow it
    pass


class LawClock:
    """Accumulates the time spent in ``MissLaw.pvalues`` (wraps it; changes nothing else)."""

    def __init__(self) -> None:
        self.seconds = 0.0
        self.calls = 0
        original = misses.MissLaw.pvalues

        def timed(law: misses.MissLaw, day_rows: object, count: int) -> tuple[float, float]:
            began = time.perf_counter()
            try:
                return original(law, day_rows, count)
            finally:
                self.seconds += time.perf_counter() - began
                self.calls += 1

        misses.MissLaw.pvalues = timed  # type: ignore[method-assign]


def build(folder: Path, rows: int, fit_days: int, days: int, seed: int) -> Path:
    """A database with one model fitted on ``fit_days`` days and ``days`` unchecked days."""
    db = folder / "volume.db"
    settings = settings_for(db)
    init_database(settings)
    engine = open_engine(settings.database_url)
    rng = np.random.default_rng(seed)
    fit_path = folder / "fit.csv"
    frame(rng, START, fit_days, rows).to_csv(fit_path, index=False)
    fit_model(settings, FitRequest("loads", fit_path, "load_minutes", ("pallets",), "docked_at",
                                   "load_id"),
              now=now_after(START + timedelta(days=fit_days)), engine=engine)
    first = START + timedelta(days=fit_days)
    last = first + timedelta(days=days - 1)
    block = folder / "block.csv"
    frame(rng, first, days, rows).to_csv(block, index=False)
    with engine.connect() as conn:
        model = get_model(conn, "loads")
    ingest_file(engine, model, block, options_for(settings, "loads", now=now_after(last)))
    engine.dispose()
    return db


def check_block(template: Path, work: Path, fit_days: int, days: int, clock: LawClock,
                budget: float) -> tuple[float, float]:
    """Check the block on a fresh copy of ``template``: (seconds, of which in the law)."""
    db = work / "run.db"
    shutil.copyfile(template, db)
    settings = settings_for(db)
    engine = open_engine(settings.database_url)
    last = START + timedelta(days=fit_days + days - 1)

    def stop(signum: int, frame_: FrameType | None) -> None:
        raise OverBudget

    previous = signal.signal(signal.SIGALRM, stop)
    signal.setitimer(signal.ITIMER_REAL, budget)
    misses._day_pmf.cache_clear()  # each run starts cold, as a fresh process would
    law_before = clock.seconds
    began = time.perf_counter()
    try:
        outcome = run_checks(settings, through=last, now=now_after(last), engine=engine)
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
        engine.dispose()
    took = time.perf_counter() - began
    assert len(outcome.checks) == days, f"expected {days} checks, got {len(outcome.checks)}"
    return took, clock.seconds - law_before


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", default="300,3000,6000,12000,30000",
                        help="rows a day, comma-separated")
    parser.add_argument("--fit-days", type=int, default=60)
    parser.add_argument("--days", type=int, default=14)
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--budget", type=float, default=900.0,
                        help="seconds allowed for one timed check run")
    args = parser.parse_args()
    volumes = [int(v) for v in args.rows.split(",")]
    clock = LawClock()
    results: dict[int, float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for rows in volumes:
            folder = Path(tmp) / f"r{rows}"
            folder.mkdir()
            began = time.perf_counter()
            template = build(folder, rows, args.fit_days, args.days, seed=rows)
            setup = time.perf_counter() - began
            runs: list[tuple[float, float]] = []
            over = False
            for _ in range(args.repeats):
                with tempfile.TemporaryDirectory() as work:
                    try:
                        runs.append(check_block(template, Path(work), args.fit_days, args.days,
                                                clock, args.budget))
                    except OverBudget:
                        over = True
                        break
            if over:
                print(f"{rows:6d} rows/day: check of {args.days} days > {args.budget:.0f} s "
                      f"(stopped; built in {setup:.1f} s)", flush=True)
                continue
            took, law = min(runs)
            results[rows] = took
            total_rows = rows * args.days
            print(f"{rows:6d} rows/day: check of {args.days} days {took:8.3f} s "
                  f"({1e6 * took / total_rows:6.1f} us/row), of which law of misses "
                  f"{law:7.3f} s (built in {setup:.1f} s)", flush=True)
    if 3000 in results and 30000 in results:
        print(f"ratio t(30000) / (10 x t(3000)) = {results[30000] / (10 * results[3000]):.2f} "
              "(goal <= ~1)")
    elif 3000 in results and 30000 in volumes:
        print("ratio t(30000) / (10 x t(3000)): not available, 30000 rows/day over budget")


if __name__ == "__main__":
    main()
