"""Giant records on the csv-module path (issue 11, item 9).

A record longer than MAX_RECORD_BYTES is rejected ("row_too_long", its first line, the start of
its text) without being held whole, whether it is one physical line (inside quotes or not) or a
quoted field spanning many lines, plain or gzip; the rows around it keep their line numbers.
A quote never closed rejects its line ("bad_quoting") and the lines after it are read as rows.

Where a record ends is checked against the outside reference the path relies on: Python's
``csv.reader`` (doubled quotes, strict=False), on random text.
"""

from __future__ import annotations

import csv
import gzip
import io
import json
import random
import subprocess
import sys
import tracemalloc
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest

from monitor.ingest.readers import (
    BLOCK_LIMIT,
    DELIMITERS,
    MAX_RECORD_BYTES,
    QUOTED,
    START,
    _quote_state,
    open_file,
)
from monitor.ingest.service import ingest_paths
from monitor.store.batches import rejected_rows_of
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from monitor.store.models import create_model
from tests.support.ingest import LOADS, NOW, Store, csv_text

ROOT = Path(__file__).resolve().parents[2]
COLUMNS = list(LOADS.columns)
BEFORE = ["L1,2026-03-02 08:00,10,31.5,D1", 'L2,2026-03-02 09:00,12,35,"D2, east"']
AFTER = ["L4,2026-03-02 11:00,4,30,D1", 'L5,2026-03-02 12:00,5,31,"D""5"""']
GIANT = 3 * MAX_RECORD_BYTES  # well past the limit, small enough for the default suite
START_OF_ROW = "L3,2026-03-02 10:00,3,30,"


# where a record ends: the csv module decides ------------------------------------------------
def _csv_record_ends(text: str, delimiter: str) -> list[int]:
    """The physical line on which each record of ``text`` ends, as csv.reader reads it."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=False)
    return [reader.line_num for _ in reader]


def _our_record_ends(text: str, delimiter: str, rng: random.Random) -> list[int]:
    """The same from _quote_state, each line fed in random pieces (as the limit cuts them)."""
    ends, state = [], START
    lines = io.StringIO(text, newline="").readlines()
    for number, line in enumerate(lines, start=1):
        cuts = sorted(rng.sample(range(len(line) + 1), min(2, len(line) + 1)))
        for piece in (line[:cuts[0]], line[cuts[0]:cuts[-1]], line[cuts[-1]:]):
            state = _quote_state(piece, state, delimiter)
        if state != QUOTED:
            ends.append(number)
            state = START
    if state == QUOTED:  # csv.reader ends a record at the end of the file, even inside quotes
        ends.append(len(lines))
    return ends


def test_records_end_where_the_csv_module_ends_them() -> None:
    rng = random.Random(20260311)
    for trial in range(4000):
        delimiter = DELIMITERS[trial % len(DELIMITERS)]
        tokens = ["a", "b", delimiter, '"', '""', "\n", "\r\n", "\r", " "]
        text = "".join(rng.choice(tokens) for _ in range(rng.randint(1, 40)))
        assert _our_record_ends(text, delimiter, rng) == _csv_record_ends(text, delimiter), \
            repr(text)


# giant records around good rows ---------------------------------------------------------------
@dataclass
class Giant:
    name: str
    record: str  # the record at line 4, without its line end
    lines: int  # physical lines it takes
    reason: str
    last: bool = False  # at the end of the file, without a line end

    @property
    def after(self) -> list[str]:
        """Two rows after the giant; after a quote never closed, none that could close it."""
        return [] if self.last else PLAIN_AFTER if self.reason == "bad_quoting" else AFTER


PLAIN_AFTER = ["L4,2026-03-02 11:00,4,30,D1", 'L5,2026-03-02 12:00,5,31,""']  # "" is empty


def _giants(size: int) -> list[Giant]:
    line = "x" * 79 + "\n"
    n = size // len(line)
    return [
        Giant("quoted line", START_OF_ROW + '"' + "x" * size + '"', 1, "row_too_long"),
        Giant("quoted line with commas and doubled quotes",
              START_OF_ROW + '"' + 'a,""b"",' * (size // 8) + '",D3', 1, "row_too_long"),
        Giant("unquoted line", START_OF_ROW + "x" * size, 1, "row_too_long"),
        Giant("quoted field over many lines", START_OF_ROW + '"' + line * n + 'end"', n + 1,
              "row_too_long"),
        Giant("quoted field closing mid-line", START_OF_ROW + '"' + line * n + 'x" y,z', n + 1,
              "row_too_long"),
        Giant("unclosed quote", START_OF_ROW + '"D3 waiting for', 1, "bad_quoting"),
        Giant("unclosed quote on a giant line", START_OF_ROW + '"' + "x" * size, 1,
              "bad_quoting"),
        Giant("quoted line at the end", START_OF_ROW + '"' + "x" * size + '"', 1, "row_too_long",
              last=True),
        Giant("unclosed quote at the end", START_OF_ROW + '"' + line * n, n, "bad_quoting",
              last=True),
    ]


GIANTS = _giants(GIANT)


def _write(tmp: Path, giant: Giant, compressed: bool, newline: str = "\n") -> Path:
    text = csv_text(*BEFORE, giant.record, *giant.after, newline=newline)
    if giant.last:
        text = text.removesuffix(newline)
    path = tmp / ("night.csv.gz" if compressed else "night.csv")
    path.write_bytes(gzip.compress(text.encode(), 1) if compressed else text.encode())
    return path


def _read(path: Path, chunk_rows: int = 3):
    accepted, rejected, read = [], [], 0
    for chunk in open_file(path, COLUMNS, chunk_rows).chunks():
        accepted += chunk.lines.tolist()
        rejected += chunk.malformed
        read += chunk.rows
    return accepted, rejected, read


@pytest.mark.parametrize("compressed", [False, True], ids=["plain", "gzip"])
@pytest.mark.parametrize("giant", GIANTS, ids=lambda g: g.name)
def test_a_giant_record_is_one_rejection_between_accepted_rows(tmp_path: Path, giant: Giant,
                                                                compressed: bool) -> None:
    # Before: a quoted field over many lines was cut at the csv module's field limit and its
    # remaining lines read as rows (thousands of wrong_field_count), the closing quote then
    # swallowing the rows after it; an unclosed quote made the rest of the file one field.
    accepted, rejected, read = _read(_write(tmp_path, giant, compressed))
    after = 4 + giant.lines
    unclosed_lines = giant.lines - 1 if giant.reason == "bad_quoting" else 0
    assert accepted == [2, 3] + ([] if giant.last else [after, after + 1])
    assert [(r.line, r.reason) for r in rejected][:1] == [(4, giant.reason)]
    # an unclosed quote's row is its first line; the lines after it are rows of their own
    assert len(rejected) == 1 + unclosed_lines
    assert [r.line for r in rejected[1:]] == list(range(5, 5 + unclosed_lines))
    assert {r.reason for r in rejected[1:]} <= {"wrong_field_count"}
    assert read == len(accepted) + len(rejected)
    assert rejected[0].raw.startswith(START_OF_ROW) and len(rejected[0].raw) < 4200


@pytest.mark.parametrize("length", range(MAX_RECORD_BYTES - 1, MAX_RECORD_BYTES + 4))
def test_line_numbers_hold_when_a_crlf_meets_the_read_limit(tmp_path: Path, length: int) -> None:
    # At one of these lengths the read limit falls between the CR and the LF of the row's line
    # end; they must still count as one line end, or every later row would be one line off.
    # (Rows this long are refused either way: the csv module takes fields up to 128 KiB.)
    record = START_OF_ROW + '"' + "x" * (length - len(START_OF_ROW) - 2) + '"'
    accepted, rejected, _ = _read(_write(tmp_path, Giant("", record, 1, "row_too_long"),
                                         False, "\r\n"))
    assert accepted == [2, 3, 5, 6]
    assert [(r.line, r.reason) for r in rejected] == [(4, "row_too_long")]


@pytest.mark.parametrize("compressed", [False, True], ids=["plain", "gzip"])
@pytest.mark.parametrize("giant", [GIANTS[0], GIANTS[3], GIANTS[6]], ids=lambda g: g.name)
def test_reading_a_giant_holds_a_bounded_share_of_it(tmp_path: Path, giant: Giant,
                                                     compressed: bool) -> None:
    # 8 x the limit, read by Python objects that tracemalloc sees (str and bytes); before, the
    # whole line was read at once, twice over
    big = next(g for g in _giants(8 * GIANT) if g.name == giant.name)
    path = _write(tmp_path, big, compressed)
    del big
    tracemalloc.start()
    try:
        _, rejected, _ = _read(path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert rejected[0].reason == giant.reason
    assert peak < 4 * GIANT, f"{peak / 2**20:.1f} MiB traced for a {8 * GIANT >> 20} MiB record"


@pytest.mark.parametrize("giant", [GIANTS[0], GIANTS[3], GIANTS[5]], ids=lambda g: g.name)
def test_ingest_counts_balance_around_a_giant(store: Store, giant: Giant) -> None:
    path = _write(store.tmp, giant, False)
    (summary,) = ingest_paths(store.settings, "loads", [path], now=NOW)
    assert (summary.accepted, summary.duplicates) == (4, 0)
    assert summary.read == summary.accepted + summary.duplicates + summary.rejected
    assert summary.reasons == {giant.reason: 1}
    with store.engine.connect() as conn:
        rows = rejected_rows_of(conn, summary.batch_id)
    assert [(r.line, r.reason) for r in rows] == [(4, giant.reason)]


def test_long_quoted_rows_come_in_chunks_bounded_by_bytes(tmp_path: Path) -> None:
    # Before: chunks were bounded by rows only, so 200 000 rows of up to 1 MiB could be held at
    # once on this path (the unquoted path reads blocks of BLOCK_LIMIT bytes).
    door = '"' + "z" * 100_000 + '"'
    path = tmp_path / "long.csv"
    path.write_text(csv_text(*(f"L{i},2026-03-02 10:00,3,30,{door}" for i in range(60))))
    source = open_file(path, COLUMNS, 1000)
    lines, sizes = [], []
    for chunk in source.chunks():
        lines += chunk.lines.tolist()
        sizes.append(sum(map(len, chunk.texts(np.arange(len(chunk.lines))))))
    assert lines == list(range(2, 62))
    assert len(sizes) > 1 and max(sizes) <= BLOCK_LIMIT + MAX_RECORD_BYTES


# memory of a whole ingest, in a process of its own -------------------------------------------
def test_ingesting_a_300_mb_quoted_line_stays_small(tmp_path: Path) -> None:
    # Before: the peak grew by 1.9 x the line's size (577 MB; the line read whole, then
    # joined); now by 14 MB. The bound is a sixth of the line. bench_memory.py: 2 GB lines.
    size = 300 * 10**6
    path = tmp_path / "giant.csv"
    with path.open("w") as out:
        out.write(csv_text(*BEFORE))
        out.write(START_OF_ROW + '"')
        block = "x" * (16 << 20)
        for start in range(0, size, len(block)):
            out.write(block[:size - start])
        out.write('"\n' + "\n".join(AFTER) + "\n")
    url = f"sqlite:///{tmp_path / 'fitwatch.db'}"
    engine = open_engine(url)
    upgrade_database(engine)
    with engine.begin() as conn:
        create_model(conn, LOADS, datetime(2026, 3, 1, tzinfo=UTC))
    engine.dispose()
    try:
        out = subprocess.run([sys.executable, "-m", "tests.ingest.memory_child", url, "loads",
                              str(path)], cwd=ROOT, capture_output=True, text=True, timeout=120)
    finally:
        path.unlink()  # pytest keeps recent tmp folders: not 300 MB each
    assert out.returncode == 0, out.stderr
    result = json.loads(out.stdout)
    assert (result["accepted"], result["reasons"]) == (4, {"row_too_long": 1})
    grown = result["peak_mb"] - result["start_mb"]
    assert grown < size / 6 / 2**20, result
