"""Ingestion service: idempotence, strictness, chunking, day statistics, Parquet, SQL, inbox."""

from __future__ import annotations

import csv
import dataclasses
import gzip
import os
import time
from datetime import date, datetime, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from sqlalchemy import func, select

from monitor.errors import DatabaseError, InputError, NotFoundError
from monitor.ingest.inbox import sweep_inbox, waiting_files
from monitor.ingest.readers import CsvSource, open_file
from monitor.ingest.service import (
    IngestOptions,
    ingest_file,
    ingest_paths,
    ingest_query,
    options_for,
)
from monitor.stats.moments import DayMoments
from monitor.store.batches import list_batches, rejected_rows_of
from monitor.store.observations import load_day_stats, load_observations
from monitor.store.row_days import count_observations
from monitor.store.schema import batches, rejected_rows
from tests.support.ingest import NOW, Store, csv_text

BERLIN = ZoneInfo("Europe/Berlin")


def _options(store: Store, **changes) -> IngestOptions:
    return dataclasses.replace(options_for(store.settings, "loads", now=NOW), **changes)


def _demo_rows(n: int, seed: int, start: datetime = datetime(2026, 3, 1, 6)) -> pd.DataFrame:
    """Trailer loads over several local days (invented data, only for these tests)."""
    rng = np.random.default_rng(seed)
    minutes = np.sort(rng.integers(0, 20 * 24 * 60, n))
    when = pd.Timestamp(start) + pd.to_timedelta(minutes, unit="min")
    pallets = rng.integers(1, 30, n)
    return pd.DataFrame({"load_id": [f"L{seed}-{i}" for i in range(n)],
                         "docked_at": when.strftime("%Y-%m-%d %H:%M"), "pallets": pallets,
                         "load_minutes": np.round(8 + 2.1 * pallets + rng.normal(0, 3, n), 2),
                         "door": rng.integers(1, 9, n)}).astype(object)


def _counts(store: Store) -> tuple[int, int, int]:
    with store.engine.connect() as conn:
        return (count_observations(conn, store.loads),
                conn.execute(select(func.count()).select_from(batches)).scalar_one(),
                conn.execute(select(func.count()).select_from(rejected_rows)).scalar_one())


def test_reingest_changes_nothing(store: Store) -> None:
    frame = _demo_rows(300, 1)
    frame.loc[5, "pallets"] = "many"
    path = store.tmp / "loads.csv"
    frame.to_csv(path, index=False)
    (first,) = ingest_paths(store.settings, "loads", [path], now=NOW)
    before = _counts(store)
    with store.engine.connect() as conn:
        stats_before = load_day_stats(conn, store.loads)
    (again,) = ingest_paths(store.settings, "loads", [path], now=NOW)
    assert _counts(store) == before == (299, 1, 1)
    assert again.already_ingested and again.batch_id == first.batch_id
    assert (again.read, again.accepted, again.duplicates, again.rejected) == (300, 0, 299, 1)
    with store.engine.connect() as conn:
        assert load_day_stats(conn, store.loads).revisions == stats_before.revisions


def test_same_rows_in_another_file_are_a_new_batch_of_duplicates(store: Store) -> None:
    frame = _demo_rows(50, 2)
    frame.to_csv(store.tmp / "a.csv", index=False)
    frame.to_csv(store.tmp / "b.csv", index=False, lineterminator="\r\n")
    a, b = ingest_paths(store.settings, "loads", [store.tmp / "a.csv", store.tmp / "b.csv"],
                        now=NOW)
    assert (a.accepted, b.accepted, b.duplicates) == (50, 0, 50)
    assert not b.already_ingested and b.batch_id != a.batch_id and b.affected_days == ()


def test_strict_rejects_the_whole_file_and_records_why(store: Store) -> None:
    frame = _demo_rows(40, 3)
    frame.loc[7, "load_minutes"] = "late"
    frame.to_csv(store.tmp / "s.csv", index=False)
    (summary,) = ingest_paths(store.settings, "loads", [store.tmp / "s.csv"], strict=True,
                              now=NOW)
    assert summary.status == "rejected" and summary.accepted == 0
    assert summary.rejected == 40 and summary.reasons == {"not_a_number": 1, "file_rejected": 39}
    assert "rejected whole" in summary.sentence() and "line 9" in summary.sentence()
    with store.engine.connect() as conn:
        assert count_observations(conn, store.loads) == 0
        assert load_day_stats(conn, store.loads).revisions == {}
        (batch,) = list_batches(conn, store.loads.id)
        assert batch.status == "rejected" and batch.strict
        assert [r.line for r in rejected_rows_of(conn, batch.id)] == [9]
    (lenient,) = ingest_paths(store.settings, "loads", [store.tmp / "s.csv"], now=NOW)
    assert lenient.accepted == 39 and not lenient.already_ingested


@pytest.mark.parametrize("chunk_rows", [1, 7, 10_000])
def test_chunking_does_not_change_the_outcome(store: Store, chunk_rows: int) -> None:
    frame = _demo_rows(120, 4)
    frame.loc[[3, 50], "pallets"] = ["x", "99"]  # a bad number and an out-of-range one
    rows = frame.to_csv(index=False).splitlines()
    rows += [rows[10], rows[90].replace(",", ";")]  # a duplicate and a malformed row
    rows.insert(60, rows[20].rsplit(",", 3)[0] + ",3,1.0,1")  # conflict, earlier chunk
    path = store.tmp / "c.csv"
    path.write_text("\n".join(rows) + "\n")
    summary = ingest_file(store.engine, store.loads, path, _options(store, chunk_rows=chunk_rows))
    assert (summary.read, summary.accepted, summary.duplicates) == (123, 118, 1)
    assert summary.reasons == {"not_a_number": 1, "out_of_range": 1, "wrong_field_count": 1,
                               "conflict": 1}
    with store.engine.connect() as conn:
        lines = [r.line for r in rejected_rows_of(conn, summary.batch_id)]
    assert lines == [5, 52, 61, 124]


def test_day_stats_equal_a_recomputation_from_stored_rows(store: Store) -> None:
    frames = [_demo_rows(200, 5), _demo_rows(150, 6, datetime(2026, 3, 10))]
    paths = []
    for i, frame in enumerate(frames):
        paths.append(store.tmp / f"d{i}.csv")
        frame.to_csv(paths[-1], index=False)
    summaries = ingest_paths(store.settings, "loads", paths, now=NOW)
    with store.engine.connect() as conn:
        obs = load_observations(conn, store.loads)
        stored = load_day_stats(conn, store.loads)
    assert len(obs) == 350
    direct = DayMoments.from_rows(obs.days, np.column_stack([obs.x, obs.y]))
    np.testing.assert_array_equal(stored.moments.days, direct.days)
    np.testing.assert_array_equal(stored.moments.n, direct.n)
    np.testing.assert_allclose(stored.moments.mean, direct.mean, rtol=1e-12)
    np.testing.assert_allclose(stored.moments.comoment, direct.comoment, rtol=1e-9, atol=1e-9)
    overlap = set(summaries[0].affected_days) & set(summaries[1].affected_days)
    assert overlap and all(stored.revisions[d] == 2 for d in overlap)
    # local days: 2026-03-01 06:00 + up to 20 days, all in Berlin's winter time
    local = (pd.to_datetime(pd.concat([f.docked_at for f in frames])).dt.date)
    assert set(stored.revisions) == set(local)


def test_days_are_local_calendar_dates(store: Store) -> None:
    path = store.tmp / "late.csv"
    path.write_text(csv_text("L1,2026-03-02T23:30:00Z,1,30,D",  # 00:30 on 3 March in Berlin
                             "L2,2026-03-02 23:30,1,30,D"))
    (summary,) = ingest_paths(store.settings, "loads", [path], now=NOW)
    assert summary.affected_days == (date(2026, 3, 2), date(2026, 3, 3))
    with store.engine.connect() as conn:
        obs = load_observations(conn, store.loads)
    assert obs.days.astype(str).tolist() == ["2026-03-02", "2026-03-03"]
    assert obs.observed_at.astype(str).tolist() == ["2026-03-02T22:30:00.000000",
                                                    "2026-03-02T23:30:00.000000"]


def test_parquet_with_naive_and_aware_times(store: Store) -> None:
    frame = _demo_rows(30, 7)
    naive = pa.table({"load_id": frame.load_id, "docked_at": pd.to_datetime(frame.docked_at),
                      "pallets": frame.pallets, "load_minutes": frame.load_minutes})
    pq.write_table(naive, store.tmp / "naive.parquet", row_group_size=8)
    aware = naive.set_column(1, "docked_at", pa.array(
        pd.to_datetime(frame.docked_at).dt.tz_localize(BERLIN).dt.tz_convert("UTC")))
    pq.write_table(aware, store.tmp / "aware.parquet")
    csv_path = store.tmp / "same.csv"
    frame.to_csv(csv_path, index=False)
    first = ingest_file(store.engine, store.loads, store.tmp / "naive.parquet",
                        _options(store, chunk_rows=5))
    second = ingest_file(store.engine, store.loads, store.tmp / "aware.parquet", _options(store))
    third = ingest_file(store.engine, store.loads, csv_path, _options(store))
    assert (first.accepted, second.duplicates, third.duplicates) == (30, 30, 30)


def test_fast_and_quoted_paths_read_the_same(store: Store, tmp_path: Path) -> None:
    frame = _demo_rows(80, 8)
    path = tmp_path / "plain.csv"
    frame.to_csv(path, index=False)
    columns = list(store.loads.columns)
    fast = CsvSource(path, "plain.csv", columns, 9)
    slow = CsvSource(path, "plain.csv", columns, 9, use_csv_module=True)
    assert not fast.slow and slow.slow
    for a, b in zip(fast.chunks(), slow.chunks(), strict=True):
        np.testing.assert_array_equal(a.lines, b.lines)
        rows = np.arange(len(a.lines))
        assert a.texts(rows) == b.texts(rows)
        for column in columns:
            assert a.columns[column].to_pylist() == b.columns[column].to_pylist()


@pytest.mark.parametrize("quoted", [False, True])
def test_a_gzip_file_is_read_as_the_csv_inside(store: Store, tmp_path: Path,
                                               quoted: bool) -> None:
    # Before: "looks like a binary file". gzip (RFC 1952) is what pandas.read_csv and zcat
    # read by themselves; the same rows must come out as from the plain file, on both paths.
    frame = _demo_rows(60, 11)
    plain = tmp_path / "night.csv"
    frame.to_csv(plain, index=False, quoting=csv.QUOTE_NONNUMERIC if quoted else csv.QUOTE_MINIMAL)
    packed = tmp_path / "night.csv.gz"
    packed.write_bytes(gzip.compress(plain.read_bytes()))
    columns = list(store.loads.columns)
    a, b = CsvSource(plain, "p", columns, 7), open_file(packed, columns, 7)
    assert a.slow == b.slow == quoted and (a.size, a.content_hash()) == (b.size, b.content_hash())
    for x, y in zip(a.chunks(), b.chunks(), strict=True):
        np.testing.assert_array_equal(x.lines, y.lines)
        assert x.texts(np.arange(len(x.lines))) == y.texts(np.arange(len(y.lines)))
        for column in columns:
            assert x.columns[column].to_pylist() == y.columns[column].to_pylist()
    summary = ingest_file(store.engine, store.loads, packed, _options(store))
    assert (summary.read, summary.accepted, summary.rejected) == (60, 60, 0)
    # a file cut short in transit is one clear error, not a traceback
    cut = tmp_path / "cut.csv.gz"
    cut.write_bytes(packed.read_bytes()[:-40])
    with pytest.raises(InputError, match=r"cut\.csv\.gz is not a complete gzip file"):
        open_file(cut, columns, 7)


def test_the_inbox_takes_compressed_csv_files(tmp_path: Path) -> None:
    for i, name in enumerate(["a.csv", "b.CSV.GZ", "c.gz", "d.txt", ".e.csv.gz", "f.csv.gz.part"]):
        (tmp_path / name).write_text("x")
        os.utime(tmp_path / name, ns=(i * 10**9, i * 10**9))
    assert [p.name for p in waiting_files(tmp_path)] == ["a.csv", "b.CSV.GZ"]


def test_unknown_model_and_uninitialised_database(store: Store, make_settings,
                                                  tmp_path: Path) -> None:
    path = store.tmp / "x.csv"
    path.write_text(csv_text("L1,2026-03-02 08:00,1,30,D"))
    with pytest.raises(NotFoundError, match="known models: hashed, loads"):
        ingest_paths(store.settings, "trucks", [path], now=NOW)
    with pytest.raises(DatabaseError, match="fitwatch init"):
        ingest_paths(make_settings(f"sqlite:///{tmp_path}/none.db"), "loads", [path], now=NOW)
    assert not (tmp_path / "none.db").exists()


def test_progress_bar_runs(store: Store, capsys) -> None:
    _demo_rows(20, 9).to_csv(store.tmp / "p.csv", index=False)
    summary = ingest_file(store.engine, store.loads, store.tmp / "p.csv",
                          _options(store, progress=True))
    assert summary.accepted == 20


# the SQL source ---------------------------------------------------------------------------------
def test_query_source_uses_since_and_dedupes(store: Store, tmp_path: Path) -> None:
    source_url = f"sqlite:///{tmp_path / 'erp.db'}"
    frame = _demo_rows(40, 10)
    from sqlalchemy import create_engine
    erp = create_engine(source_url)
    frame.iloc[:25].to_sql("loads", erp, index=False)
    erp.dispose()
    query = ("SELECT load_id, docked_at, pallets, load_minutes FROM loads "
             "WHERE docked_at >= strftime('%Y-%m-%d %H:%M', :since, '-2 days')")
    first = ingest_query(store.engine, store.loads, source_url, query, _options(store))
    assert (first.read, first.accepted) == (25, 25)
    erp = create_engine(source_url)
    frame.iloc[25:].to_sql("loads", erp, index=False, if_exists="append")
    erp.dispose()
    second = ingest_query(store.engine, store.loads, source_url, query, _options(store))
    assert second.accepted == 15 and second.rejected == 0
    assert second.read < 40  # only rows since the last stored time (minus the margin)
    # the two-day margin reads some stored rows again: counted as duplicates, not stored twice
    assert second.duplicates == second.read - 15 > 0
    third = ingest_query(store.engine, store.loads, source_url, query, _options(store))
    assert third.already_ingested and third.accepted == 0 and third.batch_id is None
    assert "nothing new" in third.sentence()
    with store.engine.connect() as conn:
        assert count_observations(conn, store.loads) == 40


def test_query_source_errors(store: Store, tmp_path: Path) -> None:
    from monitor.errors import InputError, MissingColumnsError
    url = f"sqlite:///{tmp_path / 'erp.db'}"
    _demo_rows(3, 11).to_sql("loads", url, index=False)
    with pytest.raises(InputError, match=r"query .* failed"):
        ingest_query(store.engine, store.loads, url, "SELECT * FROM nowhere", _options(store))
    with pytest.raises(MissingColumnsError, match="'pallets' missing"):
        ingest_query(store.engine, store.loads, url, "SELECT load_id, docked_at, load_minutes "
                     "FROM loads", _options(store))


# the inbox --------------------------------------------------------------------------------------
def test_inbox_sweep_archives_and_rejects(store: Store, tmp_path: Path) -> None:
    inbox = tmp_path / "inbox"
    (inbox / "loads").mkdir(parents=True)
    _demo_rows(10, 12).to_csv(inbox / "loads" / "day1.csv", index=False)
    (inbox / "loads" / "broken.csv").write_text("nothing,useful\n1,2\n")
    (inbox / "loads" / "partial.csv.part").write_text("still being written")
    settings = dataclasses.replace(store.settings, ingest=dataclasses.replace(
        store.settings.ingest, inbox=str(inbox)))
    outcomes = sweep_inbox(store.engine, settings, NOW).files
    by_name = {o.path.name: o for o in outcomes}
    assert set(by_name) == {"day1.csv", "broken.csv"}
    assert by_name["day1.csv"].path == inbox / "loads" / "archive" / "day1.csv"
    assert by_name["day1.csv"].summary.accepted == 10
    assert by_name["broken.csv"].path.parent.name == "rejected"
    reason = (inbox / "loads" / "rejected" / "broken.csv.reason.txt").read_text()
    assert "missing in" in reason
    assert (inbox / "loads" / "partial.csv.part").exists()
    _demo_rows(10, 12).to_csv(inbox / "loads" / "day1.csv", index=False)  # sent again
    (again,) = sweep_inbox(store.engine, settings, NOW).files
    assert again.summary.already_ingested
    assert again.path == inbox / "loads" / "archive" / "day1-2.csv"


def test_a_database_error_leaves_inbox_files_where_they_are(store: Store, tmp_path: Path,
                                                            monkeypatch) -> None:
    import monitor.ingest.inbox as inbox_module

    inbox = tmp_path / "inbox"
    (inbox / "loads").mkdir(parents=True)
    _demo_rows(5, 13).to_csv(inbox / "loads" / "day2.csv", index=False)
    settings = dataclasses.replace(store.settings, ingest=dataclasses.replace(
        store.settings.ingest, inbox=str(inbox)))

    def locked(*args, **kwargs):
        raise DatabaseError("could not store day2.csv: database is locked")

    monkeypatch.setattr(inbox_module, "ingest_file", locked)
    with pytest.raises(DatabaseError):
        sweep_inbox(store.engine, settings, NOW)
    assert (inbox / "loads" / "day2.csv").exists()
    assert not (inbox / "loads" / "rejected").exists()


def test_options_validate() -> None:
    with pytest.raises(ValueError, match="aware"):
        IngestOptions(BERLIN, {}, False, datetime(2026, 1, 1), timedelta(0), 10, False)


@pytest.mark.parametrize("query", [
    "UPDATE loads SET pallets = pallets",  # runs, but returns no result set
    "CREATE TABLE scratch (a INTEGER)",  # DDL on SQLite
    "DELETE FROM loads WHERE 0"])
def test_a_source_query_without_rows_is_a_clear_error(store: Store, tmp_path: Path,
                                                      query: str) -> None:
    """Before: ResourceClosedError (a traceback) from reading the columns of no result."""
    from monitor.errors import InputError
    url = f"sqlite:///{tmp_path / 'erp.db'}"
    _demo_rows(3, 12).to_sql("loads", url, index=False)
    with pytest.raises(InputError, match=r"returned no rows to read \(is it a SELECT\?\)"):
        ingest_query(store.engine, store.loads, url, query, _options(store))


def test_a_slow_sqlite_source_is_cancelled_after_its_timeout(store: Store,
                                                            tmp_path: Path) -> None:
    from monitor.errors import InputError
    url = f"sqlite:///{tmp_path / 'erp.db'}"
    _demo_rows(3, 13).to_sql("loads", url, index=False)
    endless = ("WITH RECURSIVE n(i) AS (SELECT 1 UNION ALL SELECT i + 1 FROM n "
               "WHERE i < 1000000000000) SELECT load_id, docked_at, pallets, load_minutes "
               "FROM loads, (SELECT max(i) AS m FROM n)")
    started = time.monotonic()
    with pytest.raises(InputError, match="took longer than 1 s and was cancelled"):
        ingest_query(store.engine, store.loads, url, endless, _options(store),
                     timeout_seconds=1.0)
    assert time.monotonic() - started < 10  # before: no limit at all


@pytest.mark.postgres
def test_a_slow_postgresql_source_is_cancelled_after_its_timeout(
        store: Store, postgres_url: str) -> None:
    from monitor.errors import InputError
    sleepy = ("SELECT 'L1' AS load_id, '2026-03-02 08:00' AS docked_at, 3 AS pallets, "
              "30.0 AS load_minutes FROM (SELECT pg_sleep(20)) AS s")
    started = time.monotonic()
    with pytest.raises(InputError, match="took longer than 1 s and was cancelled"):
        ingest_query(store.engine, store.loads, postgres_url, sleepy, _options(store),
                     timeout_seconds=1.0)
    assert time.monotonic() - started < 10  # PostgreSQL's statement_timeout cancelled it


def test_implausibly_old_times_are_rejected_with_the_window(store: Store) -> None:
    """Years 0001 and 1900 were stored as observation times; now the plausible window starts
    at ingest.earliest_day (default 1990-01-01, in the configured zone, Europe/Berlin here)."""
    path = store.write("old.csv", csv_text("L1,0001-01-01 08:00,10,31.5,D1",
                                           "L2,1900-03-02 09:00,12,35,D2",
                                           "L3,1989-12-31 23:59,12,35,D2",
                                           "L4,1990-01-01 00:00,12,35,D2",
                                           "L5,2026-03-02 09:00,12,35,D2"))
    summary = ingest_file(store.engine, store.loads, path, _options(store))
    assert (summary.accepted, summary.rejected) == (2, 3)
    assert summary.reasons == {"too_early": 3}
    with store.engine.connect() as conn:
        (first, *_) = rejected_rows_of(conn, summary.batch_id)
    assert first.line == 2 and "before 1990-01-01, the earliest plausible day" in first.detail
    older = _options(store, earliest_day=date(1900, 1, 1))
    again = ingest_file(store.engine, store.loads, path, older)
    assert (again.accepted, again.rejected) == (2, 1)  # 1900 and 1989 now; 0001 still not
