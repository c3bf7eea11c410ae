"""Does a night cost the same after a month and after two years? And over 100 models?

    python tests/benchmarks/bench_night.py [--rows 2000] [--short 30] [--long 720] [--models 100]

Two SQLite databases hold one model fitted on 60 days and then 30 or 720 checked days of
history at 2000 rows a day (generated like the demo). Timed: one more night in each, the
ingest of that day's file and its check, best of a few repeats (each repeat on a fresh copy of
the database). Goal (issue 4): long / short <= 1.2. Then one night over 100 models (200 rows a
day each, 60 fitted and 30 checked days): the total and the cost per model, against the same
single-model night measured in this run. Last, the daemon's whole run over those 100 models
(inbox sweep, checks, alerts into an .eml folder) against that ingest + check baseline.
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.config import Settings, parse_settings
from monitor.ingest.service import ingest_file, options_for
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.monitoring.check import run_checks
from monitor.runtime.nightly import run_night
from monitor.store.engine import open_engine
from monitor.store.migrate import init_database
from monitor.store.models import get_model

START = date(2024, 1, 1)
FIT_DAYS = 60


def frame(rng: np.random.Generator, first: date, days: int, rows: int, *,
          exact: bool = False, tag: str = "") -> pd.DataFrame:
    """Loading-dock rows, about ``rows`` a day (Poisson; ``exact``: exactly ``rows``), ids
    prefixed with ``tag``."""
    counts = np.full(days, rows) if exact else rng.poisson(rows, days)
    day = np.repeat(np.arange(days), counts)
    seconds = rng.integers(5 * 3600, 22 * 3600, day.size)
    stamps = (pd.Timestamp(first) + pd.to_timedelta(day, unit="D")
              + pd.to_timedelta(seconds, unit="s"))
    pallets = np.clip(np.rint(rng.normal(22, 7, day.size)), 4, 33)
    minutes = 9 + 2.1 * pallets + rng.normal(0, 2.5, days)[day] + rng.normal(0, 5, day.size)
    return pd.DataFrame({"load_id": [f"{tag}{first:%y%m%d}-{i}" for i in range(day.size)],
                         "docked_at": stamps.strftime("%Y-%m-%d %H:%M:%S"),
                         "pallets": pallets, "load_minutes": np.round(minutes, 1)})


def settings_for(path: Path) -> Settings:
    return parse_settings({"database": {"url": f"sqlite:///{path}"},
                           "schedule": {"timezone": "UTC"}})


def now_after(day: date) -> datetime:
    return datetime.combine(day + timedelta(days=1), datetime.min.time(), tzinfo=UTC)


def build(folder: Path, models: list[str], history_days: int, rows: int, seed: int) -> Path:
    """A database with ``models`` fitted on 60 days and checked through ``history_days``."""
    db = folder / "fitwatch.db"
    settings = settings_for(db)
    init_database(settings)
    engine = open_engine(settings.database_url)
    rng = np.random.default_rng(seed)
    for name in models:
        fit_path = folder / f"{name}_fit.csv"
        frame(rng, START, FIT_DAYS, rows).to_csv(fit_path, index=False)
        fit_model(settings, FitRequest(name, fit_path, "load_minutes", ("pallets",),
                                       "docked_at", "load_id"),
                  now=now_after(START + timedelta(days=FIT_DAYS)), engine=engine)
        history = folder / f"{name}_history.csv"
        first = START + timedelta(days=FIT_DAYS)
        frame(rng, first, history_days, rows).to_csv(history, index=False)
        with engine.connect() as conn:
            model = get_model(conn, name)
        last = first + timedelta(days=history_days - 1)
        ingest_file(engine, model, history, options_for(settings, name, now=now_after(last)))
    last = START + timedelta(days=FIT_DAYS + history_days - 1)
    run_checks(settings, through=last, now=now_after(last), engine=engine)
    engine.dispose()
    return db


def one_night(template: Path, work: Path, models: list[str], history_days: int, rows: int,
              seed: int) -> tuple[float, float]:
    """Ingest and check one more day on a fresh copy of ``template``: (ingest s, check s)."""
    db = work / "night.db"
    shutil.copyfile(template, db)
    settings = settings_for(db)
    engine = open_engine(settings.database_url)
    day = START + timedelta(days=FIT_DAYS + history_days)
    rng = np.random.default_rng(seed)
    files = {}
    for name in models:
        files[name] = work / f"{name}_night.csv"
        frame(rng, day, 1, rows).to_csv(files[name], index=False)
    began = time.perf_counter()
    for name in models:
        with engine.connect() as conn:
            model = get_model(conn, name)
        ingest_file(engine, model, files[name], options_for(settings, name, now=now_after(day)))
    ingested = time.perf_counter()
    outcome = run_checks(settings, through=day, now=now_after(day), engine=engine)
    checked = time.perf_counter()
    assert len(outcome.checks) == len(models), "each model checks exactly the new night"
    engine.dispose()
    return ingested - began, checked - ingested


def daemon_night(template: Path, work: Path, models: list[str], history_days: int, rows: int,
                 seed: int) -> float:
    """The daemon's run (:func:`run_night`) for one more day, files waiting in the inbox."""
    db = work / "night.db"
    shutil.copyfile(template, db)
    settings = parse_settings({"database": {"url": f"sqlite:///{db}"},
                               "schedule": {"timezone": "UTC"},
                               "ingest": {"inbox": str(work / "inbox")},
                               "alerts": {"to": ["lead@example.com"],
                                          "eml_dir": str(work / "mail")}})
    engine = open_engine(settings.database_url)
    day = START + timedelta(days=FIT_DAYS + history_days)
    rng = np.random.default_rng(seed)
    for name in models:
        folder = work / "inbox" / name
        folder.mkdir(parents=True)
        frame(rng, day, 1, rows).to_csv(folder / "night.csv", index=False)
    began = time.perf_counter()
    run = run_night(settings, engine, now=now_after(day))
    took = time.perf_counter() - began
    assert len(run.sweep.files) == len(models) and len(run.checks.checks) == len(models)
    engine.dispose()
    return took


def best(template: Path, models: list[str], history: int, rows: int, repeats: int
         ) -> tuple[float, float]:
    results = []
    for r in range(repeats):
        with tempfile.TemporaryDirectory() as work:
            results.append(one_night(template, Path(work), models, history, rows, 100 + r))
    return min(r[0] for r in results), min(r[1] for r in results)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=2000)
    parser.add_argument("--short", type=int, default=30)
    parser.add_argument("--long", type=int, default=720)
    parser.add_argument("--models", type=int, default=100)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        timings = {}
        for label, days in (("short", args.short), ("long", args.long)):
            folder = root / label
            folder.mkdir()
            began = time.perf_counter()
            template = build(folder, ["loads"], days, args.rows, seed=7)
            setup = time.perf_counter() - began
            timings[label] = best(template, ["loads"], days, args.rows, args.repeats)
            print(f"{days:4d} days of history ({days * args.rows:,} rows; built and checked in "
                  f"{setup:.1f} s): one night ingest {timings[label][0] * 1000:.0f} ms, "
                  f"check {timings[label][1] * 1000:.0f} ms")
        ratio_check = timings["long"][1] / timings["short"][1]
        ratio_all = sum(timings["long"]) / sum(timings["short"])
        print(f"ratio long / short: check {ratio_check:.2f}, ingest + check {ratio_all:.2f} "
              "(goal <= 1.2)")

        folder = root / "many"
        folder.mkdir()
        names = [f"m{i:03d}" for i in range(args.models)]
        template = build(folder, names, 30, 200, seed=11)
        many = best(template, names, 30, 200, max(1, args.repeats - 1))
        single_folder = root / "single200"
        single_folder.mkdir()
        single = best(build(single_folder, ["m000"], 30, 200, seed=11), ["m000"], 30, 200,
                      args.repeats)
        print(f"one night over {args.models} models (200 rows a day each): ingest "
              f"{many[0]:.2f} s, check {many[1]:.2f} s, i.e. {1000 * sum(many) / args.models:.0f}"
              f" ms per model; a single such model alone: {1000 * sum(single):.0f} ms "
              f"(ratio per model / single {sum(many) / args.models / sum(single):.2f})")
        runs = []
        for r in range(max(1, args.repeats - 1)):
            with tempfile.TemporaryDirectory() as work:
                runs.append(daemon_night(template, Path(work), names, 30, 200, 100 + r))
        print(f"the daemon's run over the same {args.models} models (inbox, checks, alerts): "
              f"{min(runs):.2f} s; ratio to ingest + check {min(runs) / sum(many):.2f}")


if __name__ == "__main__":
    main()
