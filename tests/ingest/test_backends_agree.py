"""PostgreSQL's bulk path (COPY into a staging table, one INSERT ... ON CONFLICT, then a read of
what was stored before under the keys it skipped) counts and stores exactly what SQLite's
executemany path does.

The same files go into a fresh SQLite and a fresh PostgreSQL database with small chunks (so a
key meets itself earlier in the same file, in another chunk, as well as in another file): after
every file the summaries, the rejected rows with their reasons, the stored rows, the replaced
rows and the day statistics must be equal, row for row. A last test makes another transaction
store a key while the PostgreSQL INSERT runs.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import replace
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np
import psycopg
import pytest
from sqlalchemy import Engine, select, text

from monitor.domain.model import ModelRecord
from monitor.ingest.service import IngestOptions, ingest_file
from monitor.store.batches import list_batches, rejected_rows_of
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from monitor.store.models import create_model
from monitor.store.schema import metadata, observations, replaced_rows
from tests.support.ingest import HASHED, LOADS, NOW, csv_text

pytestmark = pytest.mark.postgres

OPTIONS = IngestOptions(ZoneInfo("Europe/Berlin"), {"pallets": (0, 60)}, False, NOW,
                        timedelta(minutes=5), 7, False)
LATER = NOW + timedelta(hours=1)


@pytest.fixture
def engines(tmp_path: Path, postgres_url: str) -> Iterator[dict[str, Engine]]:
    made = {"sqlite": open_engine(f"sqlite:///{tmp_path / 'agree.db'}"),
            "postgresql": open_engine(postgres_url)}
    try:
        for engine in made.values():
            upgrade_database(engine)
        with made["postgresql"].begin() as conn:
            names = ", ".join(f'"{t.name}"' for t in metadata.sorted_tables)
            conn.execute(text(f"TRUNCATE {names} RESTART IDENTITY CASCADE"))
        for engine in made.values():
            with engine.begin() as conn:
                create_model(conn, LOADS, NOW)
                create_model(conn, HASHED, NOW)
        yield made
    finally:
        for engine in made.values():
            engine.dispose()


def _model(engine: Engine, name: str) -> ModelRecord:
    from monitor.store.models import get_model

    with engine.connect() as conn:
        return get_model(conn, name)


def _state(engine: Engine, model: ModelRecord) -> dict[str, Any]:
    """Everything ingestion wrote for ``model``, in a backend-neutral order."""
    with engine.connect() as conn:
        stored = conn.execute(
            select(observations.c.obs_key, observations.c.batch_id,
                   observations.c.observed_at_us, observations.c.day, observations.c.y,
                   observations.c.x1)
            .where(observations.c.model_id == model.id).order_by(observations.c.obs_key)).all()
        old = conn.execute(
            select(replaced_rows.c.obs_key, replaced_rows.c.batch_id,
                   replaced_rows.c.old_batch_id, replaced_rows.c.observed_at_us,
                   replaced_rows.c.day, replaced_rows.c.y, replaced_rows.c.x1)
            .where(replaced_rows.c.model_id == model.id)
            .order_by(replaced_rows.c.obs_key, replaced_rows.c.batch_id)).all()
        batches = list_batches(conn, model.id)
        rejected = {b.id: [(r.line, r.reason, r.detail, r.raw) for r in
                           rejected_rows_of(conn, b.id)] for b in batches}
        counts = [(b.id, b.status, b.read, b.accepted, b.duplicates, b.rejected,
                   dict(b.reasons), b.first_day, b.last_day) for b in batches]
        from monitor.store.observations import load_day_stats

        stats = load_day_stats(conn, model)
    return {"rows": [tuple(r) for r in stored], "replaced": [tuple(r) for r in old],
            "batches": counts, "rejected": rejected,
            "days": [str(d) for d in stats.moments.days], "n": stats.moments.n.tolist(),
            "mean": stats.moments.mean.tolist(), "comoment": stats.moments.comoment.tolist(),
            "revisions": sorted(stats.revisions.items())}


def _ingest_both(engines: dict[str, Engine], name: str, path: Path,
                 options: IngestOptions = OPTIONS) -> dict[str, Any]:
    summaries = {}
    for backend, engine in engines.items():
        model = _model(engine, name)
        summary = ingest_file(engine, model, path, options)
        summaries[backend] = (summary.batch_id, summary.status, summary.read, summary.accepted,
                              summary.duplicates, summary.rejected, dict(summary.reasons),
                              summary.replaced, summary.already_ingested,
                              summary.affected_days)
    assert summaries["postgresql"] == summaries["sqlite"]
    states = {backend: _state(engine, _model(engine, name))
              for backend, engine in engines.items()}
    assert states["postgresql"] == states["sqlite"]
    return {"summary": summaries["sqlite"], "state": states["sqlite"]}


def _rows(lines: list[str]) -> str:
    return csv_text(*lines)


def test_duplicates_conflicts_and_corrections_count_alike(engines: dict[str, Engine],
                                                          tmp_path: Path) -> None:
    first = [f"L{i:02d},2026-03-0{1 + i % 5} {8 + i % 9:02d}:00,{i % 30 + 1},{20 + i},D1"
             for i in range(30)]
    first.insert(9, first[2])  # the same row again, in the next chunk: a duplicate
    first.insert(20, "L05,2026-03-01 09:00,3,99,D1")  # L05 again with other values: a conflict
    first.insert(3, first[1])  # a duplicate within the same chunk
    first.append("L50,2026-03-01 08:00,99,20,D1")  # out of range
    one = tmp_path / "one.csv"
    one.write_text(_rows(first))
    done = _ingest_both(engines, "loads", one)
    assert done["summary"][2:7] == (34, 30, 2, 2, {"conflict": 1, "out_of_range": 1})

    second = [first[0], first[4].replace(",D1", ",D2"),  # same key and values: duplicate
              first[6].replace(",2026-03-0", ",2026-03-1"),  # other time: conflict
              "L60,2026-03-06 08:00,5,30,D1", "L61,2026-03-06 09:00,6,31,D1",
              "L60,2026-03-06 08:00,5,30,D1",  # duplicate of a new row, same chunk
              *[f"L{70 + i},2026-03-07 0{i % 9}:30,{i + 1},{30 + i},D1" for i in range(12)],
              "L61,2026-03-06 09:00,6,32,D1"]  # conflict with a new row, earlier chunk
    two = tmp_path / "two.csv"
    two.write_text(_rows(second))
    done = _ingest_both(engines, "loads", two)
    assert done["summary"][2:7] == (19, 14, 3, 2, {"conflict": 2})

    corrected = [first[0].replace(",20,D1", ",21,D1"),  # other minutes: replaces
                 first[1],  # unchanged: duplicate
                 "L60,2026-03-08 08:00,5,30,D1",  # moved to another day: replaces
                 "L90,2026-03-08 10:00,7,33,D1",  # new
                 "L90,2026-03-08 10:00,7,34,D1"]  # conflict within the file
    fixed = tmp_path / "fixed.csv"
    fixed.write_text(_rows(corrected))
    done = _ingest_both(engines, "loads", fixed, replace(OPTIONS, replace=True, now=LATER))
    assert done["summary"][2:8] == (5, 3, 1, 1, {"conflict": 1}, 2)
    assert len(done["state"]["replaced"]) == 2

    # last, because PostgreSQL's sequences do not roll back: its later batch ids would differ
    again = _ingest_both(engines, "loads", two)  # nothing new: leaves no trace
    assert again["summary"][8] is True


def test_content_keys_count_alike(engines: dict[str, Engine], tmp_path: Path) -> None:
    rows = [f"X{i},2026-03-02 {8 + i % 10:02d}:{i % 60:02d},{i % 20 + 1},{25 + i % 7},D1"
            for i in range(40)]
    rows += rows[5:12]  # exact repeats: duplicates under the content key
    path = tmp_path / "hashed.csv"
    path.write_text(_rows(rows))
    done = _ingest_both(engines, "hashed", path)
    assert done["summary"][2:6] == (47, 40, 7, 0)
    more = tmp_path / "more.csv"
    more.write_text(_rows([*rows[30:], "Y1,2026-03-03 08:00,4,22,D1"]))
    done = _ingest_both(engines, "hashed", more)
    assert done["summary"][2:6] == (18, 1, 17, 0)


def test_many_chunks_of_random_repeats_count_alike(engines: dict[str, Engine],
                                                   tmp_path: Path) -> None:
    rng = np.random.default_rng(7)
    start = datetime(2026, 2, 1, 6)

    def line(key: int, minutes: int, pallets: int, load: float) -> str:
        when = (start + timedelta(minutes=minutes)).strftime("%Y-%m-%d %H:%M")
        return f"K{key},{when},{pallets},{load},D1"

    made: dict[int, str] = {}
    files = []
    for part in range(3):
        lines = []
        for _ in range(400):
            key = int(rng.integers(0, 600))
            if key in made and rng.random() < 0.6:
                lines.append(made[key])  # a repeat (another file's or this file's)
            else:
                new = line(key, int(rng.integers(0, 40 * 24 * 60)), int(rng.integers(1, 40)),
                           round(float(rng.normal(50, 9)), 2))
                made.setdefault(key, new)
                lines.append(new)
        path = tmp_path / f"part{part}.csv"
        path.write_text(_rows(lines))
        files.append(path)
    options = replace(OPTIONS, chunk_rows=53)
    totals = [0, 0, 0]
    for path in files:
        done = _ingest_both(engines, "loads", path, options)
        read, accepted, duplicates, rejected = done["summary"][2:6]
        assert read == accepted + duplicates + rejected == 400
        totals = [totals[0] + accepted, totals[1] + duplicates, totals[2] + rejected]
    assert totals[0] == len(done["state"]["rows"])
    assert min(totals) > 0  # every kind of outcome occurred


@contextmanager
def _fresh_postgres(url: str) -> Iterator[tuple[Engine, ModelRecord]]:
    """An engine on the session's PostgreSQL database, emptied, with the loads model."""
    engine = open_engine(url)
    try:
        upgrade_database(engine)
        with engine.begin() as conn:
            names = ", ".join(f'"{t.name}"' for t in metadata.sorted_tables)
            conn.execute(text(f"TRUNCATE {names} RESTART IDENTITY CASCADE"))
            model = create_model(conn, LOADS, NOW)
        yield engine, model
    finally:
        engine.dispose()


def test_a_key_stored_by_another_transaction_meanwhile_is_found(postgres_url: str,
                                                                tmp_path: Path) -> None:
    """Another transaction stores K2 and commits while this ingest waits for it: the probe for
    stored keys did not see K2, so the rows go straight into the table by COPY, which waits
    on the unique key, fails once the other commits and is undone to its savepoint; the merge
    then stores the rest (ON CONFLICT). K2, not in the snapshot the ingest started with, must
    still come out as a duplicate (same time and values), not be lost nor counted as stored
    by this file."""
    with _fresh_postgres(postgres_url) as (engine, model):
        with engine.begin() as conn:
            conn.execute(text("INSERT INTO batches (id, model_id, source, strict, status, "
                              "read, accepted, duplicates, rejected, reasons, started_at) "
                              "VALUES (100, :m, 'other', false, 'complete', 1, 1, 0, 0, "
                              "'{}', :t)"), {"m": model.id, "t": NOW})
        when = int((datetime(2026, 3, 2, 8, tzinfo=UTC) - datetime(1970, 1, 1, tzinfo=UTC))
                   / timedelta(microseconds=1))
        other = psycopg.connect(postgres_url)
        other.execute("INSERT INTO observations (model_id, batch_id, obs_key, observed_at_us, "
                      "day, y, x1) VALUES (%s, 100, 'K2', %s, '2026-03-02', 30, 10)",
                      (model.id, when))  # not committed yet
        path = tmp_path / "race.csv"
        path.write_text(_rows(["K1,2026-03-02 08:00,10,30,D1", "K2,2026-03-02 09:00,10,30,D1",
                               "K3,2026-03-02 10:00,10,30,D1"]))
        outcome: dict[str, Any] = {}

        def ingest() -> None:
            try:
                outcome["summary"] = ingest_file(engine, model, path, OPTIONS)
            except BaseException as exc:  # handed to the test below
                outcome["error"] = exc

        worker = threading.Thread(target=ingest)
        worker.start()
        with psycopg.connect(postgres_url, autocommit=True) as watch:
            for _ in range(200):  # until the ingest waits on the uncommitted K2
                waiting = watch.execute(
                    "SELECT count(*) FROM pg_stat_activity WHERE wait_event_type = 'Lock' "
                    "AND (query LIKE 'COPY observations%%' OR query LIKE 'WITH stored AS%%')"
                ).fetchone()
                if waiting and waiting[0]:
                    break
                time.sleep(0.05)
            else:
                pytest.fail("the ingest never waited for the other transaction")
        other.commit()
        other.close()
        worker.join(30)
        assert "error" not in outcome, outcome.get("error")
        summary = outcome["summary"]
        assert (summary.read, summary.accepted, summary.duplicates, summary.rejected) == \
            (3, 2, 1, 0)
        with engine.connect() as conn:
            keys = conn.execute(select(observations.c.obs_key, observations.c.batch_id)
                                .order_by(observations.c.obs_key)).all()
        assert [tuple(k) for k in keys] == [("K1", summary.batch_id), ("K2", 100),
                                            ("K3", summary.batch_id)]


def test_new_rows_go_straight_in_and_overlapping_ones_through_the_merge(
        postgres_url: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The fast path is taken when no key of a chunk is stored yet, and only then."""
    import monitor.store.observations as stored_rows

    taken: list[bool] = []
    real = stored_rows._copied_straight

    def spy(*args: Any) -> bool:
        taken.append(real(*args))
        return taken[-1]

    monkeypatch.setattr(stored_rows, "_copied_straight", spy)
    with _fresh_postgres(postgres_url) as (engine, model):
        first, second = tmp_path / "first.csv", tmp_path / "second.csv"
        first.write_text(_rows(["K1,2026-03-02 08:00,10,30,D1", "K2,2026-03-02 09:00,10,30,D1"]))
        second.write_text(_rows(["K2,2026-03-02 09:00,10,30,D1",
                                 "K3,2026-03-02 10:00,12,33,D1"]))
        one = ingest_file(engine, model, first, OPTIONS)
        two = ingest_file(engine, model, second, OPTIONS)
        assert taken == [True, False]
        assert (one.accepted, one.duplicates) == (2, 0) and (two.accepted, two.duplicates) == (1, 1)
        with engine.connect() as conn:
            keys = conn.execute(select(observations.c.obs_key, observations.c.batch_id)
                                .order_by(observations.c.obs_key)).all()
        assert [tuple(k) for k in keys] == [("K1", one.batch_id), ("K2", one.batch_id),
                                            ("K3", two.batch_id)]
        # a stored key the probe does not look at (the second of 200): the COPY fails on the
        # unique key, is undone, and the merge stores the rest
        third = tmp_path / "third.csv"
        fresh = [f"N{i:03d},2026-03-03 08:{i % 60:02d},10,30,D1" for i in range(200)]
        fresh[1] = "K1,2026-03-02 08:00,10,30,D1"
        third.write_text(_rows(fresh))
        whole = type(OPTIONS)(**{**OPTIONS.__dict__, "chunk_rows": 1000})  # one chunk
        three = ingest_file(engine, model, third, whole)
        assert taken == [True, False, False]
        assert (three.read, three.accepted, three.duplicates) == (200, 199, 1)
