"""Files whose rows are all bad, mostly bad, or none at all: exit codes, the inbox, the record.

A file rejected whole (every row bad, or one bad row under --strict) stores nothing, exits 1
and goes to the inbox's rejected/; a file that loses most of its rows is stored, warned about
and archived; a header without rows is a night without rows (exit 0, archived). Whatever
happens, every row read is accounted for: read = accepted + duplicates + rejected.
"""

from __future__ import annotations

import dataclasses
import logging
from collections.abc import Callable
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from monitor.ingest.inbox import sweep_inbox
from monitor.ingest.service import ingest_paths
from monitor.monitoring.data_health import data_health
from monitor.store.batches import list_batches, rejected_rows_of
from monitor.store.row_days import count_observations
from tests.support.ingest import HEADER, NOW, Store, csv_text

# invented rows of the 'loads' model (tests/support/ingest.py), on 2 March 2026
GOOD = [f"L{i},2026-03-02 0{i}:10,{10 + i},{30 + i}.5,D1" for i in range(1, 8)]
# the same rows as a spreadsheet in a decimal-comma locale writes them
SEMICOLONS = [f"L{i};2026-03-02 0{i}:10;{10 + i};{30 + i},5;D1" for i in range(1, 8)]
SEMI_HEADER = HEADER.replace(",", ";")
FUTURE = [f"F{i},2031-01-0{i} 08:00,{i},{20 + i},D2" for i in range(1, 5)]


def _balanced(store: Store) -> None:
    with store.engine.connect() as conn:
        for batch in list_batches(conn, store.loads.id):
            assert batch.read == batch.accepted + batch.duplicates + batch.rejected
            assert len(rejected_rows_of(conn, batch.id)) == batch.rejected - batch.reasons.get(
                "file_rejected", 0)


def test_a_file_whose_every_row_is_bad_is_rejected_whole(store: Store) -> None:
    path = store.write("semi.csv", csv_text(*SEMICOLONS, header=SEMI_HEADER))
    (summary,) = ingest_paths(store.settings, "loads", [path], now=NOW)
    assert summary.rejected_whole and summary.status == "rejected"
    assert (summary.read, summary.accepted, summary.rejected) == (7, 0, 7)
    sentence = summary.sentence()
    assert sentence.startswith(f"{path}: rejected whole, nothing stored: all 7 rows are bad")
    assert "e.g. line 2: load_minutes is '31,5', not a number" in sentence
    with store.engine.connect() as conn:
        (batch,) = list_batches(conn, store.loads.id)
        assert batch.status == "rejected" and not batch.strict
        assert count_observations(conn, store.loads) == 0
    _balanced(store)
    (again,) = ingest_paths(store.settings, "loads", [path], now=NOW)
    assert again.already_ingested and again.rejected_whole  # still nothing of it stored
    assert again.sentence().startswith(f"{path}: rejected whole before (batch")


BAD = [row.replace(".5", "½") for row in GOOD]  # "31½": not a number


@pytest.mark.parametrize("text, strict, code, stderr", [
    (csv_text(*SEMICOLONS, header=SEMI_HEADER), False, 1,
     "semi.csv was rejected whole: nothing of it was stored"),
    (csv_text(*FUTURE), False, 1, "was rejected whole"),  # every row in the future
    (csv_text(*GOOD[:6], BAD[6]), True, 1, "was rejected whole"),
    (csv_text(*GOOD[:3], *BAD[3:]), False, 0, "semi.csv lost most of its rows "
                                              "(4 of 7 rejected)"),
    (csv_text(*GOOD[:6], BAD[6]), False, 0, ""),
], ids=["all bad", "all future", "strict", "mostly bad", "one bad"])
def test_ingest_exits_1_when_nothing_of_a_file_is_stored(
        store: Store, cli: Callable[..., tuple[int, str, str]], text: str, strict: bool,
        code: int, stderr: str) -> None:
    path = store.write("semi.csv", text)
    got, out, err = cli("ingest", "loads", str(path), *(["--strict"] if strict else []))
    assert got == code, (out, err)
    assert stderr in err and "Traceback" not in err and err.count("\n") <= 1
    if not stderr:
        assert err == ""
    _balanced(store)


@pytest.mark.parametrize("rows, phrase", [((GOOD[0], BAD[1]), "1 of 2 rows is bad"),
                                           ((GOOD[0], *BAD[1:3]), "2 of 3 rows are bad")])
def test_a_strict_rejection_counts_its_bad_rows_in_good_grammar(store: Store, rows: tuple[str],
                                                                 phrase: str) -> None:
    # before: "1 of 2 rows are bad"
    path = store.write("strict.csv", csv_text(*rows))
    (summary,) = ingest_paths(store.settings, "loads", [path], strict=True, now=NOW)
    assert summary.rejected_whole
    assert f"rejected whole (--strict), nothing stored: {phrase} — " in summary.sentence()
    (health,) = data_health(store.settings, ["loads"], now=NOW, engine=store.engine)
    (bad,) = health.bad_files
    assert f"was rejected whole (--strict): {phrase.replace(' of ', ' of its ')}" in (
        bad.sentence())


def test_a_header_without_rows_is_an_empty_night(store: Store,
                                                 cli: Callable[..., tuple[int, str, str]]
                                                 ) -> None:
    path = store.write("sunday.csv", HEADER + "\r\n\r\n")
    code, out, err = cli("ingest", "loads", str(path))
    assert (code, err) == (0, "")
    assert out == f"{path}: a header without rows: a night without rows, nothing to store.\n"
    table = pa.table({"load_id": pa.array([], pa.string()),
                      "docked_at": pa.array([], pa.timestamp("us", tz="UTC")),
                      "pallets": pa.array([], pa.float64()),
                      "load_minutes": pa.array([], pa.float64())})
    pq.write_table(table, store.tmp / "sunday.parquet")
    (summary,) = ingest_paths(store.settings, "loads", [store.tmp / "sunday.parquet"], now=NOW)
    assert summary.read == 0 and not summary.rejected_whole
    with store.engine.connect() as conn:
        assert [b.read for b in list_batches(conn, store.loads.id)] == [0, 0]


def test_the_inbox_files_each_kind_where_it_belongs(store: Store, tmp_path: Path,
                                                    caplog: pytest.LogCaptureFixture) -> None:
    inbox = tmp_path / "inbox"
    folder = inbox / "loads"
    folder.mkdir(parents=True)
    (folder / "a_semi.csv").write_text(csv_text(*SEMICOLONS, header=SEMI_HEADER))
    (folder / "b_sunday.csv").write_text(HEADER + "\n")
    (folder / "c_mostly.csv").write_text(csv_text(*GOOD[:3], *BAD[3:]))
    (folder / "d_good.csv").write_text(csv_text(*(r.replace("L", "G") for r in GOOD)))
    settings = dataclasses.replace(store.settings, ingest=dataclasses.replace(
        store.settings.ingest, inbox=str(inbox)))
    with caplog.at_level(logging.INFO, logger="monitor"):
        swept = sweep_inbox(store.engine, settings, NOW).files
    where = {f.path.name: (f.path.parent.name, f.outcome) for f in swept}
    assert where == {"a_semi.csv": ("rejected", "rejected"),
                     "b_sunday.csv": ("archive", "archived"),
                     "c_mostly.csv": ("archive", "archived"),
                     "d_good.csv": ("archive", "archived")}
    reason = (folder / "rejected" / "a_semi.csv.reason.txt").read_text()
    assert "rejected whole, nothing stored: all 7 rows are bad" in reason
    warned = [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING]
    assert len(warned) == 2
    assert "a_semi.csv moved to" in warned[0] and "rejected whole" in warned[0]
    assert "c_mostly.csv lost most of its rows" in warned[1]
    _balanced(store)
