"""The bad-input suite of issue 3: every file either ends in a balanced summary whose rejected rows
are recorded with line and reason, or in a one-line error; never a traceback.

Time-zone facts used: Europe/Berlin follows the EU rule (Directive 2000/84/EC): summer time
starts on the last Sunday of March at 01:00 UTC (02:00 local jumps to 03:00) and ends on the last
Sunday of October at 01:00 UTC (03:00 local goes back to 02:00). In 2026 those Sundays are
29 March and 25 October.
"""

from __future__ import annotations

import io
import json
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from monitor.errors import InputError, MissingColumnsError
from monitor.ingest.service import ingest_paths
from monitor.interface.cli import main
from monitor.store.batches import rejected_rows_of
from monitor.store.observations import load_observations
from monitor.store.row_days import count_observations
from tests.support.ingest import HEADER, NOW, Store, csv_text

GOOD = ["L1,2026-03-02 08:00,10,31.5,D1", "L2,2026-03-02 09:00,12,35,D2"]


@dataclass
class Case:
    name: str
    content: str | bytes
    accepted: int
    duplicates: int = 0
    reasons: dict[str, int] = field(default_factory=dict)
    lines: dict[int, str] = field(default_factory=dict)  # rejected line -> reason
    model: str = "loads"
    suffix: str = ".csv"


ROW_CASES = [
    Case("text in numbers", csv_text(*GOOD, "L3,2026-03-02 10:00,ten,30,D1",
                                     "L4,2026-03-02 10:00,1O,30,D1"),
         2, reasons={"not_a_number": 2}, lines={4: "not_a_number", 5: "not_a_number"}),
    Case("NaN in the response", csv_text(*GOOD, "L3,2026-03-02 10:00,3,NaN,D1",
                                         "L4,2026-03-02 10:00,3,nan,D1"),
         2, reasons={"not_finite": 2}),
    Case("infinities", csv_text(*GOOD, "L3,2026-03-02 10:00,inf,30,D1",
                                "L4,2026-03-02 10:00,3,-Infinity,D1",
                                "L5,2026-03-02 10:00,3,1e999,D1"),
         2, reasons={"not_finite": 3}),
    Case("empty fields", csv_text(*GOOD, "L3,2026-03-02 10:00,,30,D1", "L4,,3,30,D1",
                                  ",2026-03-02 10:00,3,30,D1", "L6,2026-03-02 10:00,3,   ,D1"),
         2, reasons={"empty_field": 3, "bad_id": 1},
         lines={4: "empty_field", 5: "empty_field", 6: "bad_id", 7: "empty_field"}),
    Case("bad timestamps", csv_text(*GOOD, "L3,14/03/2026 08:00,3,30,D1",
                                    "L4,2026-02-30 08:00,3,30,D1",
                                    "L5,yesterday,3,30,D1", "L6,2026-03-02T25:00,3,30,D1"),
         2, reasons={"bad_time": 4}),
    Case("future timestamps", csv_text(*GOOD, "L3,2026-04-01 14:10,3,30,D1",
                                       "L4,2026-04-01T12:00:00Z,3,30,D1",
                                       "L5,2027-01-01 00:00,3,30,D1"),
         # NOW is 12:00 UTC = 14:00 in Berlin (CEST); 5 minutes of tolerance
         3, reasons={"future_time": 2}, lines={4: "future_time", 6: "future_time"}),
    Case("BOM and CRLF", "\ufeff" + csv_text(*GOOD, newline="\r\n"), 2),
    Case("quoted commas", csv_text(*GOOD, 'L3,2026-03-02 10:00,3,30,"D1, east"',
                                   'L4,2026-03-02 10:00,"1,5",30,D1'),
         3, reasons={"not_a_number": 1}, lines={5: "not_a_number"}),
    Case("quoted newline keeps line numbers", csv_text(
        'L3,2026-03-02 10:00,3,30,"door\nwith a note"', "L4,2026-03-02 10:00,x,30,D1"),
         1, reasons={"not_a_number": 1}, lines={4: "not_a_number"}),
    Case("wrong delimiter in rows", csv_text(*GOOD, "L3;2026-03-02 10:00;3;30;D1"),
         2, reasons={"wrong_field_count": 1}, lines={4: "wrong_field_count"}),
    Case("semicolon file", csv_text("L1;2026-03-02 08:00;10;31.5;D1",
                                    header=HEADER.replace(",", ";")), 1),
    Case("unquoted comma adds a field", csv_text(*GOOD, "L3,2026-03-02 10:00,3,30,D1, east"),
         2, reasons={"wrong_field_count": 1}),
    Case("huge field", csv_text(*GOOD, "L3,2026-03-02 10:00,3,30," + "x" * (2 << 20),
                                "L4,2026-03-02 11:00,4,30,D1"),
         3, reasons={"row_too_long": 1}, lines={4: "row_too_long"}),
    Case("large text in a number", csv_text("L3,2026-03-02 10:00," + "9" * 100_000 + "x,30,D"),
         0, reasons={"not_a_number": 1}),
    Case("duplicate ids within the file", csv_text(*GOOD, GOOD[0], GOOD[1], GOOD[0]),
         2, duplicates=3),
    Case("conflicting ids within the file", csv_text(*GOOD, "L1,2026-03-02 08:00,10,32.5,D1",
                                                     "L2,2026-03-02 09:30,12,35,D2"),
         2, reasons={"conflict": 2}, lines={4: "conflict", 5: "conflict"}),
    Case("DST gap and overlap", csv_text(*GOOD, "L3,2026-03-29 02:30,3,30,D1",
                                         "L4,2026-10-25 02:30,3,30,D1",
                                         "L5,2026-03-29 03:30,3,30,D1",
                                         "L6,2026-03-29T02:30:00+01:00,3,30,D1"),
         4, reasons={"dst_gap": 1, "dst_ambiguous": 1},
         lines={4: "dst_gap", 5: "dst_ambiguous"}),
    Case("out of range", csv_text(*GOOD, "L3,2026-03-02 10:00,61,30,D1",
                                  "L4,2026-03-02 10:00,-1,30,D1", "L5,2026-03-02 10:00,3,601,D1"),
         2, reasons={"out_of_range": 3}),
    Case("id too long", csv_text(*GOOD, "L" * 201 + ",2026-03-02 10:00,3,30,D1"),
         2, reasons={"bad_id": 1}),
    Case("blank lines and spaces", csv_text(GOOD[0], "", "  L2 , 2026-03-02 09:00 , 12 , 35 ,D2",
                                            "", "L3,2026-03-02 10:00,q,35,D2"),
         2, reasons={"not_a_number": 1}, lines={6: "not_a_number"}),
    Case("mixed offsets and naive times", csv_text(
        "L1,2026-03-02T08:00:00+01:00,1,30,D", "L2,2026-03-02 08:00:01,1,30,D",
        "L3,2026-03-02T07:00:02Z,1,30,D", "L4,2026-03-02T08:00:03.250-05:00,1,30,D"), 4),
    Case("identical rows without id", csv_text(*GOOD, GOOD[0], "L9,2026-03-02 08:00,10,31.5,D9"),
         2, duplicates=2, model="hashed"),
    Case("text in numbers without id", csv_text(*GOOD, "L3,2026-03-02 10:00,3,thirty,D1"),
         2, reasons={"not_a_number": 1}, model="hashed"),
    Case("quoted header names", csv_text(*GOOD, header='"' + HEADER.replace(",", '","') + '"'),
         2),
    Case("lone CR inside a field", csv_text(*GOOD, "L3,2026-03-02 10:00,3,30,D\r1",
                                            "L4,2026-03-02 10:00,3\r,30,D1",  # CR is blank
                                            "L5,2026-03-02 10:00,3\r4,30,D1"),
         4, reasons={"not_a_number": 1}, lines={6: "not_a_number"}),
    Case("tab separated", csv_text(*(g.replace(",", "\t") for g in GOOD),
                                   header=HEADER.replace(",", "\t")), 2, suffix=".tsv"),
    Case("invalid UTF-8 in a row", (csv_text(*GOOD) + "L3,2026-03-02 10:00,\xff3,30,D1\n"
                                    ).encode("latin-1"),
         2, reasons={"not_a_number": 1}),
]


def _ingest(store: Store, case: Case, path: Path):
    (summary,) = ingest_paths(store.settings, case.model, [path], now=NOW)
    return summary


@pytest.mark.parametrize("case", ROW_CASES, ids=lambda c: c.name)
def test_row_level_problems_are_recorded(store: Store, case: Case) -> None:
    path = store.write("input" + case.suffix, case.content)
    summary = _ingest(store, case, path)
    assert summary.read == summary.accepted + summary.duplicates + summary.rejected
    assert (summary.accepted, summary.duplicates) == (case.accepted, case.duplicates)
    assert dict(summary.reasons) == case.reasons
    model = store.loads if case.model == "loads" else store.hashed
    with store.engine.connect() as conn:
        assert count_observations(conn, model) == case.accepted
        rows = rejected_rows_of(conn, summary.batch_id)
    assert len(rows) == summary.rejected
    for line, reason in case.lines.items():
        assert any(r.line == line and r.reason == reason for r in rows), (line, reason, rows)
    assert all(r.raw and r.detail for r in rows)
    assert str(path) in summary.sentence() and "\n" not in summary.sentence()


def test_conflicts_and_duplicates_across_files(store: Store) -> None:
    first = store.write("a.csv", csv_text(*GOOD))
    second = store.write("b.csv", csv_text(GOOD[0], "L2,2026-03-02 09:00,12,36,D2",
                                           "L3,2026-03-02 10:00,3,30,D1"))
    a, b = ingest_paths(store.settings, "loads", [first, second], now=NOW)
    assert (a.accepted, b.accepted, b.duplicates, b.reasons) == (2, 1, 1, {"conflict": 1})
    conflict = next(e for e in b.examples if e.code == "conflict")
    assert conflict.line == 3 and f"batch {a.batch_id}" in conflict.detail
    assert "load_minutes 36 here, 35 there" in conflict.detail
    with store.engine.connect() as conn:
        stored = load_observations(conn, store.loads)
    assert sorted(stored.y.tolist()) == [30.0, 31.5, 35.0]  # the first value wins


def test_dst_overlap_with_offsets_is_two_distinct_instants(store: Store) -> None:
    path = store.write("dst.csv", csv_text("L1,2026-10-25T02:30:00+02:00,1,30,D",
                                           "L2,2026-10-25T02:30:00+01:00,1,30,D"))
    (summary,) = ingest_paths(store.settings, "loads", [path], now=NOW.replace(month=11))
    assert summary.accepted == 2 and summary.affected_days[0].isoformat() == "2026-10-25"
    with store.engine.connect() as conn:
        obs = load_observations(conn, store.loads)
    assert np.diff(obs.observed_us).tolist() == [3_600 * 10**6]


# file-level problems ----------------------------------------------------------------------------
def _parquet(table: pa.Table) -> bytes:
    sink = io.BytesIO()
    pq.write_table(table, sink)
    return sink.getvalue()


FILE_CASES = [
    ("empty file", b"", ".csv", "is empty"),
    ("random bytes", np.random.default_rng(7).bytes(4096), ".csv", "binary file"),
    ("latin-1 header", "zeit,gewicht\xe4\n1,2\n".encode("latin-1"), ".csv", "not UTF-8"),
    ("missing column", "load_id,docked_at,load_minutes\nL1,2026-03-02 08:00,3\n", ".csv",
     "column 'pallets' missing in .*; found: load_id, docked_at, load_minutes"),
    ("duplicate column", HEADER + ",pallets\nL1,2026-03-02 08:00,3,30,D,4\n", ".csv",
     "'pallets' appears 2 times"),
    ("CR line endings", (HEADER + "\rL1,2026-03-02 08:00,3,30,D\r"), ".csv", "CR-only"),
    ("random bytes named parquet", np.random.default_rng(8).bytes(512), ".parquet",
     "not a readable Parquet file"),
    ("parquet with a timestamp as number", _parquet(pa.table({
        "load_id": ["L1"], "docked_at": pa.array([NOW]), "pallets": pa.array([NOW]),
        "load_minutes": [30.0]})), ".parquet", "'pallets' .* holds timestamp"),
    ("parquet with a boolean id", _parquet(pa.table({
        "load_id": [True], "docked_at": pa.array([NOW]), "pallets": [3.0],
        "load_minutes": [30.0]})), ".parquet", "'load_id' .* holds bool"),
    ("parquet with numbers as time", _parquet(pa.table({
        "load_id": ["L1"], "docked_at": [1.5], "pallets": [3.0], "load_minutes": [30.0]})),
     ".parquet", "'docked_at' .* holds double"),
    ("parquet missing a column", _parquet(pa.table({"load_id": ["L1"], "pallets": [3.0]})),
     ".parquet", "missing in"),
]


@pytest.mark.parametrize("name, content, suffix, message", FILE_CASES,
                         ids=[c[0] for c in FILE_CASES])
def test_file_level_problems_are_one_line_errors(store: Store, name: str, content: str | bytes,
                                                 suffix: str, message: str) -> None:
    path = store.write("input" + suffix, content)
    with pytest.raises(InputError, match=message) as info:
        ingest_paths(store.settings, "loads", [path], now=NOW)
    assert "\n" not in str(info.value)
    with store.engine.connect() as conn:
        assert count_observations(conn, store.loads) == 0


def test_missing_file_and_folder(store: Store) -> None:
    with pytest.raises(InputError, match="no such file"):
        ingest_paths(store.settings, "loads", [store.tmp / "nope.csv"], now=NOW)
    with pytest.raises(InputError, match="is a folder"):
        ingest_paths(store.settings, "loads", [store.tmp], now=NOW)


def test_no_file_is_stored_when_a_later_one_is_bad(store: Store) -> None:
    good = store.write("good.csv", csv_text(*GOOD))
    with pytest.raises(MissingColumnsError):
        ingest_paths(store.settings, "loads", [good, store.write("bad.csv", "a,b\n1,2\n")],
                     now=NOW)
    with store.engine.connect() as conn:
        assert count_observations(conn, store.loads) == 0


@pytest.mark.skipif(os.geteuid() == 0, reason="root reads files whatever their mode")
def test_unreadable_file(store: Store) -> None:
    path = store.write("locked.csv", csv_text(*GOOD))
    path.chmod(0)
    with pytest.raises(InputError, match="cannot read"):
        ingest_paths(store.settings, "loads", [path], now=NOW)


def test_parquet_id_with_a_nul_character(store: Store) -> None:
    table = pa.table({"load_id": ["L1", "L\x002"], "docked_at": ["2026-03-02 08:00"] * 2,
                      "pallets": [3.0, 4.0], "load_minutes": [30.0, 31.0]})
    (summary,) = ingest_paths(store.settings, "loads", [store.write("n.parquet", _parquet(table))],
                              now=NOW)
    assert (summary.accepted, summary.reasons) == (1, {"bad_id": 1})
    assert "NUL" in summary.examples[0].detail


def test_parquet_rows_with_wrong_values(store: Store) -> None:
    table = pa.table({
        "load_id": pa.array([1, 2, 3, 4], pa.int64()),
        "docked_at": pa.array(["2026-03-02 08:00", "2026-03-02T09:00:00+01:00", "soon",
                               "2026-03-02 10:00"]),
        "pallets": pa.array(["3", "4", "5", "x"]),
        "load_minutes": pa.array([30.0, float("nan"), 31.0, 32.0]),
    })
    path = store.write("rows.parquet", _parquet(table))
    (summary,) = ingest_paths(store.settings, "loads", [path], now=NOW)
    assert summary.accepted == 1
    assert summary.reasons == {"not_finite": 1, "bad_time": 1, "not_a_number": 1}
    with store.engine.connect() as conn:
        rows = rejected_rows_of(conn, summary.batch_id)
    assert [r.line for r in rows] == [2, 3, 4]  # row numbers in the Parquet file
    assert rows[1].raw.startswith("pallets=5, load_minutes=31.0, docked_at=soon")


# the command line -------------------------------------------------------------------------------
def _config(store: Store) -> Path:
    url = store.settings.database_url
    path = store.tmp / "fitwatch.toml"
    path.write_text(f'[database]\nurl = "{url}"\n[schedule]\ntimezone = "Europe/Berlin"\n')
    return path


@pytest.mark.parametrize("name, content, suffix, message",
                         [FILE_CASES[i] for i in (0, 1, 3, 5, 8, 9)],
                         ids=[FILE_CASES[i][0] for i in (0, 1, 3, 5, 8, 9)])
def test_cli_file_errors_exit_1_with_one_line(store: Store, capsys, name, content, suffix,
                                              message) -> None:
    path = store.write("input" + suffix, content)
    code = main(["--config", str(_config(store)), "ingest", "loads", str(path)])
    captured = capsys.readouterr()
    assert code == 1
    assert captured.err.startswith("fitwatch: ") and captured.err.count("\n") == 1
    assert "Traceback" not in captured.err and captured.out == ""


def test_cli_missing_file_and_folder(store: Store, capsys) -> None:
    for target in (store.tmp / "nope.csv", store.tmp):
        assert main(["--config", str(_config(store)), "ingest", "loads", str(target)]) == 1
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "Traceback" not in err


def test_cli_json_and_sentence(store: Store, capsys) -> None:
    path = store.write("in.csv", csv_text(*GOOD, "L3,2026-03-02 10:00,ten,30,D1", GOOD[0]))
    assert main(["--config", str(_config(store)), "ingest", "loads", str(path), "--json"]) == 0
    document = json.loads(capsys.readouterr().out)
    assert {k: document[k] for k in ("read", "accepted", "duplicates", "rejected")} == {
        "read": 4, "accepted": 2, "duplicates": 1, "rejected": 1}
    assert document["reasons"] == {"not_a_number": 1}
    assert main(["--config", str(_config(store)), "ingest", "loads", str(path)]) == 0
    out = capsys.readouterr().out
    assert "already ingested" in out and "nothing changed" in out
