"""Bytes per model-year on SQLite and PostgreSQL, before and after pruning raw rows.

    python tests/benchmarks/bench_storage.py [--days 365] [--rows 200] [--keep 60] [--no-pg]

One model (one predictor, an id column) with ``--days`` days x ``--rows`` rows ingested and
checked, then pruned to the last ``--keep`` checked days (``fitwatch prune``). SQLite: the file
size after VACUUM; PostgreSQL: ``pg_total_relation_size`` per table after VACUUM FULL.
Baseline in the same run: the raw rows as a plain CSV file (what the feed itself weighs).
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import sys
import tempfile
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
from sqlalchemy import text

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.config import parse_settings
from monitor.ingest.service import ingest_file, options_for
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.lifecycle.pruning import prune
from monitor.monitoring.check import run_checks
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from monitor.store.models import get_model
from monitor.store.schema import metadata

FIRST = date(2025, 1, 6)
FIT_DAYS = 60


def loads(first: date, days: int, rows: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    day = np.repeat(np.arange(days), rows)
    pallets = rng.integers(4, 34, len(day))
    minutes = 8.5 + 2.1 * pallets + rng.normal(0, 2.5, days)[day] + rng.normal(0, 5, len(day))
    at = (pd.Timestamp(first) + pd.to_timedelta(day, "D")
          + pd.to_timedelta(6 * 3600 + rng.integers(0, 14 * 3600, len(day)), "s"))
    return pd.DataFrame({"load_id": [f"L{i:09d}" for i in range(len(day))],
                         "docked_at": at.strftime("%Y-%m-%d %H:%M:%S"),
                         "pallets": pallets, "load_minutes": minutes.round(2)})


def night_after(day: date) -> datetime:
    return datetime.combine(day + timedelta(days=1), datetime.min.time(), UTC) + timedelta(hours=3)


def sizes(engine) -> dict[str, int]:
    if engine.dialect.name == "sqlite":
        engine.dispose()
        db = sqlite3.connect(engine.url.database, isolation_level=None)
        db.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        db.execute("VACUUM")
        db.close()
        wal = Path(f"{engine.url.database}-wal")
        return {"(file)": os.path.getsize(engine.url.database)
                + (wal.stat().st_size if wal.exists() else 0)}
    with engine.connect().execution_options(isolation_level="AUTOCOMMIT") as conn:
        conn.exec_driver_sql("VACUUM FULL")
        return {t.name: int(conn.execute(text("SELECT pg_total_relation_size(:t)"),
                                         {"t": t.name}).scalar_one())
                for t in metadata.sorted_tables}


def run(url: str, args: argparse.Namespace, tmp: Path) -> None:
    engine = open_engine(url)
    upgrade_database(engine)
    settings = parse_settings({"database": {"url": url}, "schedule": {"timezone": "UTC"}})
    data = loads(FIRST, args.days, args.rows, 5)
    path = tmp / "loads.csv"
    data.to_csv(path, index=False)
    history = data[data["docked_at"] < str(FIRST + timedelta(days=FIT_DAYS))]
    history.to_csv(tmp / "history.csv", index=False)
    last = FIRST + timedelta(days=args.days - 1)
    fit_model(settings, FitRequest("bench", tmp / "history.csv", "load_minutes", ("pallets",),
                                   "docked_at", "load_id"),
              now=night_after(FIRST + timedelta(days=FIT_DAYS - 1)), engine=engine, actor="b")
    with engine.connect() as conn:
        model = get_model(conn, "bench")
    ingest_file(engine, model, path, options_for(settings, "bench", now=night_after(last)))
    run_checks(settings, ["bench"], through=last, now=night_after(last), engine=engine)
    before = sizes(engine)
    done = prune(settings, before=last - timedelta(days=args.keep - 1), now=night_after(last),
                 actor="b", engine=engine)
    after = sizes(engine)
    year = 365 / args.days
    csv_bytes = path.stat().st_size
    print(f"{engine.dialect.name}: {args.days} days x {args.rows} rows, pruned "
          f"{done[0].rows} rows on {done[0].days} days (kept {args.keep} days)")
    print(f"  baseline: the rows as CSV            {csv_bytes * year / 1e6:8.1f} MB/model-year")
    print(f"  database, every row kept             {sum(before.values()) * year / 1e6:8.1f} "
          "MB/model-year")
    print(f"  database, rows of {args.keep} days kept       "
          f"{sum(after.values()) * year / 1e6:8.1f} MB/model-year")
    for name in sorted(before, key=lambda n: -before[n])[:6]:
        print(f"    {name:16s} {before[name] / 1e6:8.2f} MB -> {after[name] / 1e6:8.2f} MB")
    engine.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--days", type=int, default=365)
    parser.add_argument("--rows", type=int, default=200)
    parser.add_argument("--keep", type=int, default=60)
    parser.add_argument("--no-pg", action="store_true")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        run(f"sqlite:///{Path(tmp) / 'bench.db'}", args, Path(tmp))
    if args.no_pg:
        return
    import psycopg

    name = f"fitwatch_bench_{os.getpid()}"
    user = os.environ.get("FITWATCH_TEST_PGUSER") or os.environ.get("PGUSER") or "postgres"
    admin = psycopg.connect(host="127.0.0.1", user=user, dbname="test", autocommit=True)
    admin.execute(f'CREATE DATABASE "{name}"')
    try:
        with tempfile.TemporaryDirectory() as tmp:
            run(f"postgresql+psycopg://{user}@127.0.0.1:5432/{name}", args, Path(tmp))
    finally:
        admin.execute(f'DROP DATABASE "{name}" WITH (FORCE)')
        admin.close()


if __name__ == "__main__":
    main()
