"""Stored observations and per-day statistics: bulk writes for ingestion, array reads for checks.

Reads run one query per call straight on the driver's cursor and convert columns with numpy;
writes go through ``executemany`` (SQLite) or ``COPY`` (PostgreSQL). No per-row objects beyond
the tuples the driver itself needs.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import (
    BigInteger,
    ClauseElement,
    Column,
    Connection,
    Date,
    Float,
    MetaData,
    String,
    Table,
    and_,
    bindparam,
    cast,
    func,
    literal_column,
    select,
    update,
)
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.sql.compiler import SQLCompiler

from monitor.domain.model import ModelRecord
from monitor.stats.moments import DayMoments, Moments
from monitor.store.engine import driver_cursor
from monitor.store.schema import day_stats, observations, predictor_columns

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


@dataclass(frozen=True, eq=False)
class Observations:
    """Stored rows of one model, sorted by day, then time."""

    days: NDArray[np.datetime64]
    x: NDArray[np.float64]
    y: NDArray[np.float64]
    observed_us: NDArray[np.int64]

    def __len__(self) -> int:
        return len(self.y)

    @property
    def observed_at(self) -> NDArray[np.datetime64]:
        """The instants as UTC ``datetime64[us]``."""
        return self.observed_us.view("datetime64[us]")


@dataclass(frozen=True, eq=False)
class StoredDayStats:
    """Day statistics of one model over the days that have rows, in day order."""

    moments: DayMoments
    revisions: dict[date, int]


@dataclass(frozen=True, eq=False)
class InsertResult:
    """Which of the given rows were stored, and what is stored under the keys of the others."""

    inserted: NDArray[np.bool_]
    positions: NDArray[np.intp]  # rows (of those given) whose key was stored before
    batch_id: NDArray[np.int64]  # ... the batch that stored it
    observed_us: NDArray[np.int64]  # ... and its values
    x: NDArray[np.float64]
    y: NDArray[np.float64]


# reading ----------------------------------------------------------------------------------------
def load_observations(conn: Connection, model: ModelRecord, first_day: date | None = None,
                      last_day: date | None = None) -> Observations:
    """Every stored row of ``model`` with ``first_day <= day <= last_day`` (bounds optional)."""
    xs = [observations.c[c] for c in predictor_columns(model.k)]
    stmt = (select(observations.c.day, observations.c.observed_at_us, observations.c.y, *xs)
            .where(_day_range(model, first_day, last_day))
            .order_by(observations.c.day, observations.c.observed_at_us, observations.c.id))
    rows = _fetch(conn, stmt)
    n = len(rows)
    if n == 0:
        return Observations(np.zeros(0, "datetime64[D]"), np.zeros((0, model.k)), np.zeros(0),
                            np.zeros(0, np.int64))
    columns = list(zip(*rows, strict=True))
    values = np.array(columns[2:], dtype=np.float64)  # (1 + k, n)
    return Observations(np.array(columns[0], dtype="datetime64[D]"),
                        np.ascontiguousarray(values[1:].T), values[0],
                        np.array(columns[1], dtype=np.int64))


def load_day_stats(conn: Connection, model: ModelRecord, first_day: date | None = None,
                   last_day: date | None = None) -> StoredDayStats:
    """The stored per-day statistics of ``model`` (days without rows are absent)."""
    stmt = (select(day_stats.c.day, day_stats.c.moments, day_stats.c.revision)
            .where(day_stats.c.model_id == model.id)
            .order_by(day_stats.c.day))
    if first_day is not None:
        stmt = stmt.where(day_stats.c.day >= first_day)
    if last_day is not None:
        stmt = stmt.where(day_stats.c.day <= last_day)
    rows = conn.execute(stmt).all()
    dim = model.k + 1
    days = [row.day for row in rows]
    parts = [Moments.from_dict(row.moments) for row in rows]
    return StoredDayStats(DayMoments.stack(np.array(days, dtype="datetime64[D]"), parts, dim),
                          {row.day: int(row.revision) for row in rows})


def days_with_rows(conn: Connection, model: ModelRecord, first_day: date | None = None,
                   last_day: date | None = None) -> list[date]:
    """The days of ``model`` that have stored rows, in order (their statistics left unread)."""
    stmt = (select(day_stats.c.day).where(day_stats.c.model_id == model.id, day_stats.c.n > 0)
            .order_by(day_stats.c.day))
    if first_day is not None:
        stmt = stmt.where(day_stats.c.day >= first_day)
    if last_day is not None:
        stmt = stmt.where(day_stats.c.day <= last_day)
    return list(conn.execute(stmt).scalars())


def last_day_with_rows(conn: Connection, model: ModelRecord, through: date) -> date | None:
    """The latest day of ``model`` on or before ``through`` that has stored rows, or None."""
    return conn.execute(select(func.max(day_stats.c.day)).where(
        day_stats.c.model_id == model.id, day_stats.c.n > 0,
        day_stats.c.day <= through)).scalar()


def last_observed_at(conn: Connection, model: ModelRecord) -> datetime | None:
    """The latest stored observation time of ``model`` (UTC), or None."""
    last_day = conn.execute(select(func.max(observations.c.day))
                            .where(observations.c.model_id == model.id)).scalar()
    if last_day is None:
        return None
    latest = conn.execute(select(func.max(observations.c.observed_at_us)).where(
        _day_range(model, last_day - timedelta(days=1), None))).scalar()
    return None if latest is None else _EPOCH + timedelta(microseconds=int(latest))


def count_observations(conn: Connection, model: ModelRecord) -> int:
    return int(conn.execute(select(func.count()).select_from(observations)
                            .where(observations.c.model_id == model.id)).scalar_one())


# writing ----------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class PreparedRows:
    """Rows ready for the driver: distinct keys and tuples (key, time, day, y, x...).

    Built by :func:`prepare_rows` (pure; can run ahead in another thread), stored by
    :func:`insert_observations`.
    """

    keys: NDArray[np.object_]
    tuples: list[tuple[Any, ...]]

    def __len__(self) -> int:
        return len(self.keys)


def prepare_rows(keys: NDArray[np.object_], observed_us: NDArray[np.int64],
                 days: NDArray[np.datetime64], x: NDArray[np.float64],
                 y: NDArray[np.float64]) -> PreparedRows:
    """The driver's tuples for these rows (``keys`` must be distinct)."""
    columns = [keys.tolist(), observed_us.tolist(), _day_strings(days), y.tolist(),
               *(x[:, j].tolist() for j in range(x.shape[1]))]
    return PreparedRows(keys, list(zip(*columns, strict=True)))


def insert_observations(conn: Connection, model: ModelRecord, batch_id: int,
                        rows: PreparedRows) -> InsertResult:
    """Store rows whose key is new for the model; report what is stored under the other keys.

    Runs inside the caller's transaction.
    """
    if len(rows) == 0:
        return _result(np.zeros(0, bool), rows.keys, [], model.k)
    if conn.dialect.name == "postgresql":
        return _insert_postgresql(conn, model, batch_id, rows)
    return _insert_sqlite(conn, model, batch_id, rows)


def _insert_sqlite(conn: Connection, model: ModelRecord, batch_id: int,
                   rows: PreparedRows) -> InsertResult:
    names = ["obs_key", "observed_at_us", "day", "y", *predictor_columns(model.k)]
    stmt = (sqlite.insert(observations)
            .values(model_id=literal_column(str(int(model.id))),
                    batch_id=literal_column(str(int(batch_id))),
                    **{name: bindparam(name) for name in names})
            .on_conflict_do_nothing(index_elements=["model_id", "obs_key"]))
    compiled = stmt.compile(dialect=conn.dialect)
    order = [names.index(p) for p in compiled.positiontup or []]
    tuples = rows.tuples
    if order != list(range(len(names))):
        tuples = [tuple(row[i] for i in order) for row in tuples]
    with driver_cursor(conn) as cursor:
        before = cursor.execute("SELECT max(id) FROM observations").fetchone()[0] or 0
        cursor.executemany(str(compiled), tuples)
        stored = cursor.rowcount
    keys = rows.keys
    if stored == len(keys):
        return _result(np.ones(len(keys), bool), keys, [], model.k)
    found = _stored_under(conn, model, keys)
    old = [row for row in found if row[1] <= before]  # rows stored before this call
    return _result(~_member(keys, {row[0] for row in old}), keys, old, model.k)


_STAGE = Table(
    "fitwatch_stage", MetaData(),
    Column("obs_key", String(200)), Column("observed_at_us", BigInteger),
    Column("day", String(10)), Column("y", Float),
    *(Column(name, Float) for name in predictor_columns(8)),
    prefixes=["TEMPORARY"], postgresql_on_commit="DROP",
)


def _insert_postgresql(conn: Connection, model: ModelRecord, batch_id: int,
                       rows: PreparedRows) -> InsertResult:
    names = ["obs_key", "observed_at_us", "day", "y", *predictor_columns(model.k)]
    exists = conn.exec_driver_sql("SELECT to_regclass('pg_temp.fitwatch_stage')").scalar()
    if exists is None:
        _STAGE.create(conn)
    else:
        conn.exec_driver_sql("TRUNCATE fitwatch_stage")
    with driver_cursor(conn) as cursor, \
            cursor.copy(f"COPY fitwatch_stage ({', '.join(names)}) FROM STDIN") as copy:
        for row in rows.tuples:
            copy.write_row(row)
    source = select(literal_column(str(int(model.id))), literal_column(str(int(batch_id))),
                    _STAGE.c.obs_key, _STAGE.c.observed_at_us,
                    cast(_STAGE.c.day, Date), _STAGE.c.y,
                    *(_STAGE.c[c] for c in names[4:]))
    stmt = (postgresql.insert(observations)
            .from_select(["model_id", "batch_id", *names], source)
            .on_conflict_do_nothing(index_elements=["model_id", "obs_key"])
            .returning(observations.c.obs_key))
    new_keys = conn.execute(stmt).scalars().all()
    keys = rows.keys
    if len(new_keys) == len(keys):
        return _result(np.ones(len(keys), bool), keys, [], model.k)
    inserted = _member(keys, set(new_keys))
    old = _stored_under(conn, model, keys[~inserted])
    return _result(inserted, keys, old, model.k)


def _member(keys: NDArray[np.object_], chosen: set[str]) -> NDArray[np.bool_]:
    return np.fromiter((key in chosen for key in keys), dtype=bool, count=len(keys))


def _stored_under(conn: Connection, model: ModelRecord,
                  keys: NDArray[np.object_]) -> list[tuple[Any, ...]]:
    """(key, id, batch_id, observed_at_us, y, x...) of the stored rows with these keys."""
    xs = [observations.c[c] for c in predictor_columns(model.k)]
    listed = bindparam("keys", keys.tolist(), type_=postgresql.ARRAY(String))
    if conn.dialect.name == "postgresql":
        match = observations.c.obs_key == func.any(listed)
    else:
        each = func.json_each(bindparam("keys", json.dumps(keys.tolist()))).table_valued("value")
        match = observations.c.obs_key.in_(select(each.c.value))
    stmt = select(observations.c.obs_key, observations.c.id, observations.c.batch_id,
                  observations.c.observed_at_us, observations.c.y, *xs).where(
        observations.c.model_id == model.id, match)
    return _fetch(conn, stmt)


def _result(inserted: NDArray[np.bool_], keys: NDArray[np.object_],
            old: Sequence[tuple[Any, ...]], k: int) -> InsertResult:
    if not old:
        return InsertResult(inserted, np.zeros(0, np.intp), np.zeros(0, np.int64),
                            np.zeros(0, np.int64), np.zeros((0, k)), np.zeros(0))
    columns = list(zip(*old, strict=True))
    where = {key: i for i, key in enumerate(keys.tolist())}
    positions = np.array([where[key] for key in columns[0]], dtype=np.intp)
    values = np.array(columns[4:], dtype=np.float64)
    return InsertResult(inserted, positions.astype(np.intp), np.array(columns[2], np.int64),
                        np.array(columns[3], np.int64), np.ascontiguousarray(values[1:].T),
                        values[0])


def delete_batch_observations(conn: Connection, batch_id: int) -> int:
    """Remove the rows a batch stored (used when ``--strict`` rejects its file after all)."""
    result = conn.execute(observations.delete().where(observations.c.batch_id == batch_id))
    return int(result.rowcount)


def merge_day_stats(conn: Connection, model: ModelRecord, added: DayMoments,
                    now: datetime) -> dict[date, int]:
    """Merge statistics of new rows into the stored ones; returns each day's new revision."""
    if len(added) == 0:
        return {}
    days = [d.item() for d in np.asarray(added.days, dtype="datetime64[D]")]
    stored = {row.day: row for row in conn.execute(
        select(day_stats.c.day, day_stats.c.moments, day_stats.c.revision).where(
            day_stats.c.model_id == model.id, day_stats.c.day >= min(days),
            day_stats.c.day <= max(days)))}
    updates: list[dict[str, Any]] = []
    inserts: list[dict[str, Any]] = []
    revisions: dict[date, int] = {}
    for i, day in enumerate(days):
        part = added.day(i)
        if part.n == 0:
            continue
        old = stored.get(day)
        if old is None:
            revisions[day] = 1
            inserts.append({"model_id": model.id, "day": day, "n": part.n,
                            "moments": part.to_dict(), "revision": 1, "updated_at": now})
        else:
            merged = Moments.from_dict(old.moments).merge(part)
            revisions[day] = int(old.revision) + 1
            updates.append({"b_day": day, "b_n": merged.n, "b_moments": merged.to_dict(),
                            "b_revision": revisions[day], "b_updated": now})
    if updates:
        conn.execute(update(day_stats).where(and_(day_stats.c.model_id == model.id,
                                                  day_stats.c.day == bindparam("b_day")))
                     .values(n=bindparam("b_n"), moments=bindparam("b_moments"),
                             revision=bindparam("b_revision"),
                             updated_at=bindparam("b_updated")), updates)
    if inserts:
        conn.execute(day_stats.insert(), inserts)
    return revisions


# helpers ----------------------------------------------------------------------------------------
def _day_range(model: ModelRecord, first_day: date | None, last_day: date | None) -> Any:
    clauses = [observations.c.model_id == model.id]
    if first_day is not None:
        clauses.append(observations.c.day >= first_day)
    if last_day is not None:
        clauses.append(observations.c.day <= last_day)
    return and_(*clauses)


def _day_strings(days: NDArray[np.datetime64]) -> list[str]:
    """ISO dates as Python strings, formatted once per distinct day."""
    unique, inverse = np.unique(np.asarray(days, dtype="datetime64[D]"), return_inverse=True)
    text = np.array([str(d) for d in unique], dtype=object)
    return text[inverse].tolist()


def _fetch(conn: Connection, stmt: ClauseElement) -> list[tuple[Any, ...]]:
    """Run a Core statement on the driver's cursor: plain tuples, no per-row processing."""
    compiled = stmt.compile(dialect=conn.dialect)
    assert isinstance(compiled, SQLCompiler)
    params = dict(compiled.params)
    if conn.dialect.name == "sqlite":
        params = {k: v.isoformat() if isinstance(v, date) else v for k, v in params.items()}
    args: Any = params
    if compiled.positiontup is not None:
        args = tuple(params[name] for name in compiled.positiontup)
    with driver_cursor(conn) as cursor:
        cursor.execute(str(compiled), args)
        return cursor.fetchall()
