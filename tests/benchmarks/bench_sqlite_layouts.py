"""Where SQLite's share of an ingest goes: raw sqlite3 inserts of prepared rows, no fitwatch.

    python tests/benchmarks/bench_sqlite_layouts.py [--rows 300000] [--repeats 4] [--out FILE]

Each case stores the same rows (key, time, day, y, x1; one model, one batch) in one
transaction, in a fresh process and database, the cases interleaved so that drifting machine
load hits all alike; the time and CPU seconds include the commit (WAL write and checkpoint).
The rows come in time order (keys and days ascending, as a nightly file with sequential ids
or content keys) or in random order. Cases:

- ``baseline``: bench_ingest.py's baseline table (five columns, a unique index on the id),
  ``executemany`` of a one-row INSERT, default journal (the yardstick);
- ``observations``: fitwatch's table as the migrations make it (rowid, unique (model_id,
  obs_key), index (model_id, day)), WAL and fitwatch's 64 MiB page cache, with one row a
  statement (``executemany``, as before issue 14) or 199 rows a statement (999 parameters), in
  the given order or each chunk of 50,000 rows (a 2 MB block of CSV) sorted by key first (as
  ``store/observations.py`` now does), or sorted by key with explicit ids in file order;
- layouts not adopted, 199 rows a statement: without the (model_id, day) index
  (``no-day-index``), and ``WITHOUT ROWID`` tables keyed by (model_id, obs_key) with the day
  index or by (model_id, day, obs_key) with a unique key index.
"""

from __future__ import annotations

import argparse
import itertools
import os
import random
import resource
import sqlite3
import statistics
import subprocess
import sys
import time
from pathlib import Path

COLUMNS = ("model_id INTEGER NOT NULL, batch_id INTEGER NOT NULL, "
           "obs_key VARCHAR(200) NOT NULL, observed_at_us BIGINT NOT NULL, day DATE NOT NULL, "
           "y FLOAT NOT NULL, " + ", ".join(f"x{i} FLOAT" for i in range(1, 9)))
ROWID = f"CREATE TABLE observations (id INTEGER NOT NULL, {COLUMNS}, PRIMARY KEY (id), "
DAY_INDEX = "CREATE INDEX ix_day ON observations (model_id, day)"
LAYOUTS = {
    "observations": [ROWID + "UNIQUE (model_id, obs_key))", DAY_INDEX],
    "no-day-index": [ROWID + "UNIQUE (model_id, obs_key))"],
    "without-rowid-key": [f"CREATE TABLE observations ({COLUMNS}, "
                          "PRIMARY KEY (model_id, obs_key)) WITHOUT ROWID", DAY_INDEX],
    "without-rowid-day": [f"CREATE TABLE observations ({COLUMNS}, "
                          "PRIMARY KEY (model_id, day, obs_key)) WITHOUT ROWID",
                          "CREATE UNIQUE INDEX ux_key ON observations (model_id, obs_key)"],
}
# (label, layout, rows a statement, sort by key first, explicit ids in file order)
CASES = [
    ("baseline", "baseline", 1, False, False),
    ("observations, 1 row a statement", "observations", 1, False, False),
    ("observations, 199 rows, as given", "observations", 199, False, False),
    ("observations, 199 rows, by key", "observations", 199, True, False),
    ("  + ids in file order", "observations", 199, True, True),
    ("no-day-index, 199 rows, by key", "no-day-index", 199, True, False),
    ("without-rowid-key, 199, by key", "without-rowid-key", 199, True, False),
    ("without-rowid-day, 199, by key", "without-rowid-day", 199, True, False),
]
START_US = 1_735_711_200_000_000  # 2025-01-01 06:00 UTC
CHUNK = 50_000  # about the rows of one 2 MB block of CSV (readers.BLOCK_LIMIT), as fitwatch


def make_rows(n: int, shuffled: bool) -> list[tuple[str, int, str, float, float]]:
    order = list(range(n))
    if shuffled:
        random.Random(1).shuffle(order)
    out = []
    for i in order:
        day = START_US // 86_400_000_000 + i * 400 // n  # 400 days, in time order
        out.append((f"L{i:08d}", START_US + i * 60_000_000,
                    time.strftime("%Y-%m-%d", time.gmtime(day * 86_400)),
                    8.0 + (i % 97) / 7, float(i % 33 + 1)))
    return out


def cpu_seconds() -> float:
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def child(case: int, n: int, shuffled: bool, path: str) -> None:
    _, layout, per, by_key, ids = CASES[case]
    rows = make_rows(n, shuffled)
    con = sqlite3.connect(path, isolation_level=None)
    if layout == "baseline":
        con.execute("CREATE TABLE loads (load_id TEXT, docked_at TEXT, pallets REAL, "
                    "load_minutes REAL, door TEXT)")
        con.execute("CREATE UNIQUE INDEX ix_loads_id ON loads (load_id)")
    else:
        con.execute("PRAGMA journal_mode = WAL")
        con.execute("PRAGMA cache_size = -65536")
        for sql in LAYOUTS[layout]:
            con.execute(sql)
    cpu, began = cpu_seconds(), time.perf_counter()
    con.execute("BEGIN IMMEDIATE")
    if layout == "baseline":
        con.executemany("INSERT INTO loads VALUES (?, ?, ?, ?, ?)",
                        ((k, "2025-01-01 06:00", x, y, "3") for k, _, _, y, x in rows))
    else:
        names = "model_id, batch_id, obs_key, observed_at_us, day, y, x1"
        one = "1, 1, ?, ?, ?, ?, ?"
        if ids:
            rows = [(i + 1, *row) for i, row in enumerate(rows)]  # type: ignore[misc]
            names, one = "id, " + names, "?, " + one
        width = len(rows[0])
        for start in range(0, len(rows), CHUNK):  # as fitwatch: sorted chunk by chunk
            chunk = rows[start:start + CHUNK]
            if by_key:
                chunk.sort(key=lambda row: row[1] if ids else row[0])
            whole = len(chunk) // per * per
            for part, size in ((chunk[:whole], per), (chunk[whole:], len(chunk) - whole)):
                if not part:
                    continue
                flat = list(itertools.chain.from_iterable(part))
                con.executemany(f"INSERT INTO observations ({names}) VALUES "
                                + ", ".join([f"({one})"] * size)
                                + " ON CONFLICT (model_id, obs_key) DO NOTHING",
                                [flat[i:i + size * width] for i in range(0, len(flat),
                                                                          size * width)])
    con.execute("COMMIT")
    seconds, cpu = time.perf_counter() - began, cpu_seconds() - cpu
    table = "loads" if layout == "baseline" else "observations"
    stored = con.execute(f"SELECT count(*) FROM {table}").fetchone()[0]
    con.close()
    size = os.path.getsize(path)
    print(seconds, cpu, size, stored)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=300_000)
    parser.add_argument("--repeats", type=int, default=4)
    parser.add_argument("--out", metavar="FILE")
    parser.add_argument("--child", type=int)
    parser.add_argument("--shuffled", action="store_true")
    parser.add_argument("--db")
    args = parser.parse_args()
    if args.child is not None:
        child(args.child, args.rows, args.shuffled, args.db)
        return
    lines: list[str] = []
    work = Path(os.environ.get("TMPDIR", "/tmp"))
    for shuffled in (False, True):
        runs: dict[int, list[list[float]]] = {i: [] for i in range(len(CASES))}
        load = os.getloadavg()[0]
        for _ in range(args.repeats):
            for i in runs:
                db = work / f"fitwatch-layouts-{os.getpid()}-{i}.db"
                out = subprocess.run(
                    [sys.executable, __file__, "--child", str(i), "--rows", str(args.rows),
                     "--db", str(db)] + (["--shuffled"] if shuffled else []),
                    capture_output=True, text=True, check=True).stdout.split()
                for suffix in ("", "-wal", "-shm"):
                    Path(f"{db}{suffix}").unlink(missing_ok=True)
                runs[i].append([float(v) for v in out])
                assert int(runs[i][-1][3]) == args.rows, "every row stored"
        lines.append(f"{args.rows:,} rows in {'random' if shuffled else 'time'} order, "
                     f"{args.repeats} runs each, interleaved, load {load:.2f} -> "
                     f"{os.getloadavg()[0]:.2f}")
        base = [statistics.median(r[j] for r in runs[0]) for j in range(2)]
        for i, (label, *_) in enumerate(CASES):
            wall, cpu, size = (statistics.median(r[j] for r in runs[i]) for j in range(3))
            lines.append(f"  {label:34s} {wall:5.2f} s ({wall / base[0]:4.2f}x)  "
                         f"cpu {cpu:5.2f} s ({cpu / base[1]:4.2f}x)  file {size / 1e6:5.1f} MB")
        print("\n".join(lines[-len(CASES) - 1:]), flush=True)
    if args.out:
        Path(args.out).write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
