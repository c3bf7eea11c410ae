"""Peak memory of ingesting a CSV file with one giant record, quoted or not, plain or gzip.

    python tests/benchmarks/bench_memory.py [--size 2000] [--rows 200000] [--kinds a,b]
                                            [--before DIR] [--out FILE]

Each file: ``load_id, docked_at, pallets, load_minutes, door`` rows (generated, as in
bench_ingest.py), half of them before and half after one giant record of ``--size`` MB in the
door field. Kinds:

- ``none``: no giant record, no quotes (the fast path's floor);
- ``none-quoted``: no giant record, every door quoted (the csv-module path's floor);
- ``unquoted``: the giant is one unquoted line (fast path);
- ``quoted``: the giant is one line whose door is a quoted field (csv-module path);
- ``multiline``: the giant is a quoted door field spanning lines of 80 characters;
- ``quoted-gz``: ``quoted``, gzip-compressed;
- ``unclosed``: the giant line opens a quote that never closes (the rows after it are real).

Each run is a fresh process ingesting into a fresh SQLite database with the default chunk size
(200 000 rows); it reports its peak resident memory (VmHWM) and time. Baseline, same run: the
unquoted giant (the fast path), and the floors without a giant. ``--before DIR`` also runs
every kind with ``monitor`` imported from DIR (e.g. an export of main), for a before/after
table; the files are the same for both.
"""

from __future__ import annotations

import argparse
import gzip
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from bench_ingest import bench_options, generate, peak_resident_mb, prepare_fitwatch

ROOT = Path(__file__).resolve().parents[2]
KINDS = ("none", "none-quoted", "unquoted", "quoted", "multiline", "quoted-gz", "unclosed")
BLOCK = 16 << 20


def write_file(path: Path, kind: str, rows: int, size: int, work: Path) -> None:
    """The generated rows with the giant record (if any) in the middle."""
    plain = work / "rows.csv"
    if not plain.exists():
        generate(plain, rows)
    lines = plain.read_text().splitlines(keepends=True)
    header, body = lines[0], lines[1:]
    if kind == "none-quoted":
        body = [line.rstrip("\n").rsplit(",", 1)[0] + f',"D{i % 12 + 1}"\n'
                for i, line in enumerate(body)]
    half = len(body) // 2
    target = path.with_suffix("") if kind.endswith("-gz") else path
    with target.open("w", newline="") as out:
        out.write(header)
        out.writelines(body[:half])
        if kind not in ("none", "none-quoted"):
            out.write("G0000001,2025-06-01 12:00,3,30.5,")
            out.write({"unquoted": "", "multiline": '"', "unclosed": '"'}.get(kind, '"'))
            line = "x" * 79 + "\n"
            piece = line * (BLOCK // 80) if kind == "multiline" else "x" * BLOCK
            written = 0
            while written < size:
                chunk = piece[:size - written]
                out.write(chunk)
                written += len(chunk)
            out.write("\n" if kind in ("unquoted", "unclosed") else '"\n')
        out.writelines(body[half:])
    if kind.endswith("-gz"):
        with target.open("rb") as src, gzip.open(path, "wb", compresslevel=1) as dst:
            shutil.copyfileobj(src, dst, BLOCK)
        target.unlink()


def run_child(csv_path: Path, db_path: Path) -> None:

    from monitor.ingest.service import ingest_file
    from monitor.store.engine import open_engine
    from monitor.store.models import get_model

    url = f"sqlite:///{db_path}"
    prepare_fitwatch(url, with_id=True)
    engine = open_engine(url)
    with engine.connect() as conn:
        model = get_model(conn, "loads")
    options = bench_options()
    floor = peak_resident_mb()
    began = time.perf_counter()
    summary = ingest_file(engine, model, csv_path, options)
    seconds = time.perf_counter() - began
    engine.dispose()
    import monitor

    print(json.dumps({"seconds": seconds, "peak_mb": peak_resident_mb(), "start_mb": floor,
                      "read": summary.read, "accepted": summary.accepted,
                      "rejected": summary.rejected, "reasons": dict(summary.reasons),
                      "monitor": str(Path(monitor.__file__).parent.parent)}))


def measure(csv_path: Path, tree: Path, work: Path) -> dict[str, object]:
    db = work / f"run-{time.monotonic_ns()}.db"
    env = {**os.environ, "PYTHONPATH": str(tree)}
    out = subprocess.run([sys.executable, __file__, "--child", str(csv_path), "--db", str(db)],
                         cwd=work, env=env, capture_output=True, text=True)
    for suffix in ("", "-wal", "-shm"):
        Path(f"{db}{suffix}").unlink(missing_ok=True)
    if out.returncode != 0:
        last = (out.stderr.strip().splitlines() or ["?"])[-1]
        return {"failed": f"exit {out.returncode}: {last}"}
    return json.loads(out.stdout.strip().splitlines()[-1])


def line(kind: str, label: str, result: dict[str, object], base: float | None,
         megabytes: float) -> str:
    """One row of the table; ``base``: the unquoted giant's peak in the same tree."""
    if "failed" in result:
        return f"{kind:12s} {label:6s} FAILED {result['failed']}"
    peak = float(result["peak_mb"])  # type: ignore[arg-type]
    ratio = f"{peak / base:5.2f}x" if base else "   -  "
    return (f"{kind:12s} {label:6s} peak {peak:7.0f} MB = {ratio} unquoted, "
            f"{float(result['seconds']):6.1f} s, read {result['read']:,}, accepted "  # type: ignore[arg-type]
            f"{result['accepted']:,}, rejected {result['rejected']:,} {result['reasons']} "
            f"[{megabytes:,.0f} MB file]")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=float, default=2000, help="giant record, MB (1e6 B)")
    parser.add_argument("--rows", type=int, default=200_000)
    parser.add_argument("--kinds", default=",".join(KINDS))
    parser.add_argument("--before", type=Path, help="a tree whose monitor/ is the 'before'")
    parser.add_argument("--out", type=Path, help="also append the table to this file")
    parser.add_argument("--child")
    parser.add_argument("--db")
    args = parser.parse_args()
    if args.child:
        run_child(Path(args.child), Path(args.db))
        return
    kinds = [k for k in args.kinds.split(",") if k]
    unknown = set(kinds) - set(KINDS)
    if unknown:
        parser.error(f"unknown kinds: {', '.join(sorted(unknown))} (known: {', '.join(KINDS)})")
    trees = [("after", ROOT)] + ([("before", args.before.resolve())] if args.before else [])
    size = int(args.size * 1e6)
    report = [f"giant record {size / 1e6:,.0f} MB, {args.rows:,} other rows, "
              f"{os.cpu_count()} CPUs; after = {ROOT}"
              + (f", before = {args.before}" if args.before else "")]
    print(report[0], flush=True)
    with tempfile.TemporaryDirectory(prefix="fitwatch-mem-") as tmp:
        work = Path(tmp)
        unquoted: dict[str, float] = {}
        for kind in sorted(kinds, key=lambda k: k != "unquoted"):  # the baseline first
            path = work / (f"{kind}.csv.gz" if kind.endswith("-gz") else f"{kind}.csv")
            write_file(path, kind, args.rows, size, work)
            megabytes = path.stat().st_size / 1e6
            for label, tree in trees:
                result = measure(path, tree, work)
                if kind == "unquoted" and "peak_mb" in result:
                    unquoted[label] = float(result["peak_mb"])  # type: ignore[arg-type]
                text = line(kind, label, result, unquoted.get(label), megabytes)
                report.append(text)
                print(text, flush=True)
            path.unlink()
    if args.out:
        with args.out.open("a") as out:
            out.write("\n".join(report) + "\n\n")


if __name__ == "__main__":
    main()
