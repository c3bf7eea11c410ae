"""Ingestion speed and memory against a hand-written baseline, measured in the same run.

    python tests/benchmarks/bench_ingest.py [--rows 1000000] [--repeats 3] [--profile]
        [--postgres URL] [--before DIR] [--shuffle] [--out FILE]

The file: ``load_id, docked_at, pallets, load_minutes, door`` rows (generated, like the demo).
Baseline: the ``csv`` module's reader plus sqlite3 ``executemany`` into one table with a unique
index on the id, in one transaction, default pragmas; it converts the two numbers with
``float()`` and checks nothing else. fitwatch: ``ingest_file`` on a fresh database (created
beforehand, not timed) with every validation check on every row. Each run is a fresh process, so
its peak resident memory (VmHWM) is its own. Goal (issue 3): ratio <= 1.0, peak < 500 MB.
``--postgres`` adds fitwatch on a PostgreSQL server and the server's own baseline,
``baseline-postgresql``: psycopg's ``COPY ... FROM STDIN (FORMAT csv)`` of the file, as read,
into one table with a unique index on the id, in one transaction (what the server itself needs
for the rows; fitwatch's ratio to it is printed too). ``--before DIR`` also times the
``monitor/`` package found in DIR (e.g. an export of an earlier commit: ``git archive COMMIT
monitor | tar -x -C DIR``) on each backend, interleaved with the rest, for a before/after ratio
from the same run. The children import ``monitor`` from this checkout (or DIR), never from
wherever the package happens to be installed.

``--shuffle`` writes the rows in random order (times and ids no longer ascending; every
B-tree then fills out of order), for the files that are not sorted.

Wall seconds include importing fitwatch's ingest modules (the baseline's ``csv`` and ``sqlite3``
are imported before its clock starts; they cost a few milliseconds); CPU seconds (user + system,
all threads) are printed too, being less sensitive to other load on the machine.
Two more kinds split the gap: ``baseline-wal`` is the baseline on a database in WAL mode (as
fitwatch's), ``baseline-observations`` the baseline's reading and executemany into fitwatch's
``observations`` table, with its two indexes, and nothing else of fitwatch.
``--profile`` then runs one more ingest per backend with the read-ahead thread switched off, so
that cProfile sees every phase, and prints the time of each phase.
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import resource
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[2]
TREE_ENV = "FITWATCH_BENCH_TREE"  # the folder whose monitor/ a child imports
PHASES = (  # (label, function) for the --profile split; cumulative times, serial run
    ("read: split and parse CSV", "readers.py:_split_block"),
    ("validate rows", "validate.py:check_rows"),
    ("  of which times and days", "validate.py:_instants"),
    ("  of which ids", "validate.py:_ids"),
    ("first of each key", "service.py:_first_of_each_key"),
    ("day statistics of chunks", "service.py:_moments"),
    ("driver tuples", "observations.py:prepare_rows"),
    ("store rows (insert)", "observations.py:insert_observations"),
    ("judge duplicates/conflicts", "service.py:_judge"),
    ("merge day statistics", "observations.py:merge_day_stats"),
    ("rejected rows", "batches.py:add_rejected_rows"),
    ("commit", "base.py:commit"),
)


def generate(path: Path, rows: int, seed: int = 1, shuffle: bool = False) -> None:
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(seed)
    start = pd.Timestamp("2025-01-01 06:00")
    minutes = np.sort(rng.integers(0, 400 * 24 * 60, rows))
    pallets = rng.integers(1, 34, rows)
    frame = pd.DataFrame({
        "load_id": pd.Series(np.arange(rows)).map("L{:08d}".format),
        "docked_at": (start + pd.to_timedelta(minutes, unit="min")).strftime("%Y-%m-%d %H:%M"),
        "pallets": pallets,
        "load_minutes": np.round(8 + 2.1 * pallets + rng.normal(0, 4, rows), 2),
        "door": rng.integers(1, 13, rows),
    })
    if shuffle:
        frame = frame.iloc[rng.permutation(rows)]
    frame.to_csv(path, index=False)


def baseline(csv_path: Path, db_path: Path) -> None:
    con = sqlite3.connect(db_path)
    con.execute("CREATE TABLE loads (load_id TEXT, docked_at TEXT, pallets REAL, "
                "load_minutes REAL, door TEXT)")
    con.execute("CREATE UNIQUE INDEX ix_loads_id ON loads (load_id)")
    with con, csv_path.open(newline="") as fh:
        reader = csv.reader(fh)
        next(reader)
        con.executemany("INSERT INTO loads VALUES (?, ?, ?, ?, ?)",
                        ((a, b, float(c), float(d), e) for a, b, c, d, e in reader))
    con.close()


def baseline_wal(csv_path: Path, db_path: Path) -> None:
    """The baseline on a database in WAL mode, as fitwatch's (the cost of WAL alone)."""
    sqlite3.connect(db_path).execute("PRAGMA journal_mode = WAL").connection.close()
    baseline(csv_path, db_path)


def baseline_observations(csv_path: Path, db_path: Path) -> None:
    """The baseline's reading and executemany, into fitwatch's ``observations`` table (made by
    the migrations beforehand; WAL, fitwatch's page cache): the cost of the table and its two
    indexes (the model's unique keys, the model's days) alone, without any of fitwatch's work.
    The day is the time's first 10 characters, the time a row number."""
    con = sqlite3.connect(db_path, isolation_level=None)
    con.execute("PRAGMA cache_size = -65536")
    con.execute("BEGIN IMMEDIATE")
    with csv_path.open(newline="") as fh:
        reader = csv.reader(fh)
        next(reader)
        con.executemany("INSERT INTO observations (model_id, batch_id, obs_key, observed_at_us, "
                        "day, y, x1) VALUES (1, 1, ?, ?, ?, ?, ?) "
                        "ON CONFLICT (model_id, obs_key) DO NOTHING",
                        ((a, i, b[:10], float(d), float(c))
                         for i, (a, b, c, d, _) in enumerate(reader)))
    con.execute("COMMIT")
    con.close()


@contextmanager
def scratch_database() -> Iterator[str]:
    """A fresh PostgreSQL database on the ``--postgres`` server, dropped afterwards; its URL."""
    import psycopg

    name = f"fitwatch_bench_{os.getpid()}"
    with psycopg.connect(os.environ["FITWATCH_BENCH_PG"], autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
        try:
            yield os.environ["FITWATCH_BENCH_PG"].rsplit("/", 1)[0] + "/" + name
        finally:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def baseline_postgresql(csv_path: Path, url: str) -> float:
    """The server's baseline: COPY of the file's bytes into one table with a unique index on the
    id, one transaction; its wall seconds (the table is made beforehand, not timed)."""
    import psycopg

    with psycopg.connect(url) as con:
        con.execute("CREATE TABLE loads (load_id TEXT, docked_at TEXT, pallets DOUBLE PRECISION, "
                    "load_minutes DOUBLE PRECISION, door TEXT)")
        con.execute("CREATE UNIQUE INDEX ix_loads_id ON loads (load_id)")
        con.commit()
        began = time.perf_counter()
        with con.cursor() as cur, cur.copy("COPY loads FROM STDIN (FORMAT csv, HEADER true)") \
                as copy, csv_path.open("rb") as fh:
            while block := fh.read(1 << 20):
                copy.write(block)
        con.commit()
        return time.perf_counter() - began


def prepare_fitwatch(url: str, with_id: bool) -> None:
    from datetime import UTC, datetime

    from monitor.domain.model import ModelSpec
    from monitor.store.engine import open_engine
    from monitor.store.migrate import upgrade_database
    from monitor.store.models import create_model

    engine = open_engine(url)
    upgrade_database(engine)
    with engine.begin() as conn:
        create_model(conn, ModelSpec("loads", "load_minutes", ("pallets",), "docked_at",
                                     "load_id" if with_id else None), datetime.now(UTC))
    engine.dispose()


def bench_options() -> Any:
    """The ingest options of the benchmark's files (every validation on)."""
    from datetime import UTC, datetime, timedelta
    from zoneinfo import ZoneInfo

    from monitor.ingest.service import IngestOptions

    return IngestOptions(ZoneInfo("Europe/Berlin"), {"pallets": (0, 60)}, False,
                         datetime(2026, 6, 1, tzinfo=UTC), timedelta(minutes=5), 200_000, False)


def run_fitwatch(csv_path: Path, url: str, profile: bool) -> dict[str, object]:
    began = time.perf_counter()
    from monitor.ingest.service import ingest_file
    from monitor.store.engine import open_engine
    from monitor.store.models import get_model

    imports = time.perf_counter() - began
    engine = open_engine(url)
    with engine.connect() as conn:
        model = get_model(conn, "loads")
    options = bench_options()
    if profile:
        import cProfile
        import pstats

        import monitor.ingest.service as service

        service.prefetch = lambda items, depth=1: iter(items)  # one thread: cProfile sees all
        profiler = cProfile.Profile()
        began = time.perf_counter()
        profiler.enable()
    summary = ingest_file(engine, model, csv_path, options)
    if profile:
        profiler.disable()
        wall = time.perf_counter() - began
        stats = pstats.Stats(profiler, stream=sys.stderr)
        print_phases(stats, wall)
        stats.sort_stats("tottime").print_stats(25)
    engine.dispose()
    return {"accepted": summary.accepted, "rejected": summary.rejected, "imports": imports}


def print_phases(stats: Any, wall: float) -> None:
    """Cumulative seconds of each phase of a serial ingest (PHASES), from cProfile's table."""
    table = stats.stats  # {(file, line, name): (cc, nc, tottime, cumtime, callers)}
    seconds = dict.fromkeys((label for label, _ in PHASES), 0.0)
    for (file, _, name), (_, _, _, cumulative, _) in table.items():
        where = f"{Path(file).name}:{name}"
        for label, function in PHASES:
            if where == function:
                seconds[label] += cumulative
    print(f"serial ingest under cProfile: {wall:.2f} s", file=sys.stderr)
    for label, value in seconds.items():
        print(f"  {label:30s} {value:6.2f} s {100 * value / wall:5.1f} %", file=sys.stderr)


def child(kind: str, csv_path: Path, db_path: Path, profile: bool) -> None:
    sys.path.insert(0, os.environ.get(TREE_ENV, str(ROOT)))
    cpu = cpu_seconds()
    if kind.startswith("baseline") and kind != "baseline-postgresql":
        if kind == "baseline-observations":
            prepare_fitwatch(f"sqlite:///{db_path}", with_id=True)
            with sqlite3.connect(db_path) as con:
                con.execute("INSERT INTO batches (id, model_id, source, strict, status, read, "
                            "accepted, duplicates, rejected, reasons, started_at) VALUES "
                            "(1, 1, 'bench', 0, 'complete', 0, 0, 0, 0, '{}', "
                            "'2026-01-01 00:00:00')")
            cpu = cpu_seconds()
        began = time.perf_counter()
        {"baseline": baseline, "baseline-wal": baseline_wal,
         "baseline-observations": baseline_observations}[kind](csv_path, db_path)
        extra: dict[str, object] = {}
    elif kind == "baseline-postgresql":
        with scratch_database() as url:
            cpu = cpu_seconds()
            seconds = baseline_postgresql(csv_path, url)
            cpu = cpu_seconds() - cpu
        print(json.dumps({"kind": kind, "seconds": seconds, "cpu": cpu,
                          "peak_mb": peak_resident_mb()}))
        return
    elif kind.startswith("fitwatch-postgresql"):
        with scratch_database() as url:
            prepare_fitwatch(url, with_id=True)
            cpu = cpu_seconds()
            began = time.perf_counter()
            extra = run_fitwatch(csv_path, url, profile)
            seconds = time.perf_counter() - began
            cpu = cpu_seconds() - cpu
        print(json.dumps({"kind": kind, "seconds": seconds, "cpu": cpu,
                          "peak_mb": peak_resident_mb(), **extra}))
        return
    else:
        url = f"sqlite:///{db_path}"
        prepare_fitwatch(url, with_id=not kind.startswith("fitwatch-hashkeys"))
        import gc
        gc.collect()
        cpu = cpu_seconds()
        began = time.perf_counter()
        extra = run_fitwatch(csv_path, url, profile)
    seconds = time.perf_counter() - began
    cpu = cpu_seconds() - cpu
    print(json.dumps({"kind": kind, "seconds": seconds, "cpu": cpu, "peak_mb": peak_resident_mb(),
                      **extra}))


def cpu_seconds() -> float:
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def peak_resident_mb() -> float:
    """Peak resident memory of this process in MB: VmHWM, which execve resets (ru_maxrss keeps
    the forking parent's peak on Linux, so it would count the benchmark driver too)."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def measure(kind: str, csv_path: Path, work: Path, profile: bool = False,
            before: str | None = None) -> dict[str, float]:
    db = work / f"{kind}-{time.monotonic_ns()}.db"
    tree = before if kind.endswith("-before") and before else str(ROOT)
    env = {**os.environ, TREE_ENV: tree}
    env.pop("PYTHONPATH", None)
    out = subprocess.run([sys.executable, __file__, "--child", kind, "--csv", str(csv_path),
                          "--db", str(db)] + (["--profile"] if profile else []),
                         cwd=tree, env=env, capture_output=True, text=True, check=True)
    if profile:
        sys.stderr.write(out.stderr)
    for suffix in ("", "-wal", "-shm"):
        Path(f"{db}{suffix}").unlink(missing_ok=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--profile", action="store_true")
    parser.add_argument("--postgres", metavar="URL",
                        help="also time fitwatch on PostgreSQL: an admin URL such as "
                             "postgresql://postgres@127.0.0.1:5432/test (a scratch database "
                             "is created and dropped)")
    parser.add_argument("--before", metavar="DIR",
                        help="also time the monitor/ package in DIR (an earlier commit)")
    parser.add_argument("--shuffle", action="store_true", help="rows in random order")
    parser.add_argument("--out", metavar="FILE", help="also write the figures to FILE")
    parser.add_argument("--child")
    parser.add_argument("--csv")
    parser.add_argument("--db")
    args = parser.parse_args()
    if args.child:
        child(args.child, Path(args.csv), Path(args.db), args.profile)
        return
    lines: list[str] = []

    def say(text: str) -> None:
        print(text, flush=True)
        lines.append(text)

    with tempfile.TemporaryDirectory(prefix="fitwatch-bench-") as tmp:
        work = Path(tmp)
        csv_path = work / "loads.csv"
        generate(csv_path, args.rows, shuffle=args.shuffle)
        size_mb = csv_path.stat().st_size / 1e6
        order = "in random order" if args.shuffle else "in time order"
        say(f"{args.rows:,} rows {order}, {size_mb:.0f} MB CSV, {os.cpu_count()} CPUs, "
            f"load {os.getloadavg()[0]:.2f} at the start, {args.repeats} runs each, interleaved")
        kinds = ["baseline", "fitwatch", "fitwatch-hashkeys"]
        if args.postgres:
            os.environ["FITWATCH_BENCH_PG"] = args.postgres
            kinds.append("fitwatch-postgresql")
        if args.before:
            kinds += [f"{kind}-before" for kind in kinds[1:]]
        kinds += ["baseline-wal", "baseline-observations"]
        if args.postgres:
            kinds.append("baseline-postgresql")
        results: dict[str, list[dict[str, float]]] = {kind: [] for kind in kinds}
        for _ in range(args.repeats):  # interleaved, so drifting machine load hits all alike
            for kind in results:
                results[kind].append(measure(kind, csv_path, work, before=args.before))
        for kind, runs in results.items():
            seconds = [r["seconds"] for r in runs]
            peak = max(r["peak_mb"] for r in runs)
            cpu = statistics.median(r["cpu"] for r in runs)
            imports = (f", of which imports {statistics.median(r['imports'] for r in runs):.2f} s"
                       if "imports" in runs[0] else "")
            say(f"{kind:28s} median {statistics.median(seconds):6.2f} s "
                f"(runs {', '.join(f'{s:.2f}' for s in seconds)}){imports}, "
                f"cpu {cpu:5.2f} s, peak {peak:.0f} MB")
        base = statistics.median(r["seconds"] for r in results["baseline"])
        for kind in kinds[1:]:
            mine = statistics.median(r["seconds"] for r in results[kind])
            cpu = statistics.median(r["cpu"] for r in results[kind]) / statistics.median(
                r["cpu"] for r in results["baseline"])
            say(f"ratio {kind} / baseline = {mine / base:.2f} (cpu {cpu:.2f})")
        if args.postgres:
            server = statistics.median(r["seconds"] for r in results["baseline-postgresql"])
            for kind in (k for k in kinds if k.startswith("fitwatch-postgresql")):
                mine = statistics.median(r["seconds"] for r in results[kind])
                say(f"ratio {kind} / baseline-postgresql = {mine / server:.2f}")
        for kind in kinds[1:]:
            if f"{kind}-before" in results:
                mine = statistics.median(r["seconds"] for r in results[kind])
                old = statistics.median(r["seconds"] for r in results[f"{kind}-before"])
                say(f"ratio {kind} / {kind}-before = {mine / old:.2f}")
        if args.out:
            Path(args.out).write_text("\n".join(lines) + "\n")
        if args.profile:
            for kind in kinds[1:2] + (["fitwatch-postgresql"] if args.postgres else []):
                print(f"--- {kind}, serial, profiled", file=sys.stderr)
                measure(kind, csv_path, work, profile=True)


if __name__ == "__main__":
    main()
