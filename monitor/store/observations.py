"""Stored observations and per-day statistics: bulk writes for ingestion, array reads for checks.

Reads run one query per call straight on the driver's cursor and convert columns with numpy;
writes go through ``executemany`` (SQLite) or ``COPY`` (PostgreSQL). No per-row objects beyond
the tuples the driver itself needs.
"""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from datetime import date, datetime
from functools import cache
from itertools import chain
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import (
    ClauseElement,
    Connection,
    String,
    and_,
    bindparam,
    func,
    literal,
    literal_column,
    select,
    update,
)
from sqlalchemy.sql.compiler import SQLCompiler

from monitor.domain.model import ModelRecord
from monitor.errors import StateError
from monitor.stats.moments import DayMoments, Moments
from monitor.store.engine import driver_connection, driver_cursor
from monitor.store.row_days import day_range
from monitor.store.schema import (
    UtcDateTime,
    day_checks,
    day_stats,
    observations,
    predictor_columns,
    replaced_rows,
)


@dataclass(frozen=True, eq=False)
class Observations:
    """Stored rows of one model, sorted by day, then time (then key)."""

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
class DayRows:
    """The stored rows of one model-day in time order (then key order), with their keys and
    batches."""

    keys: NDArray[np.object_]  # the id column's value, or the content key
    batch_ids: NDArray[np.int64]
    observed_us: NDArray[np.int64]  # UTC epoch microseconds
    x: NDArray[np.float64]
    y: NDArray[np.float64]

    def __len__(self) -> int:
        return len(self.y)


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
            .where(day_range(model, first_day, last_day))
            .order_by(observations.c.day, observations.c.observed_at_us, _by_key(conn)))
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


def load_day_rows(conn: Connection, model: ModelRecord, day: date) -> DayRows:
    """The stored rows of ``model`` on ``day`` with their keys and batches (one query)."""
    xs = [observations.c[c] for c in predictor_columns(model.k)]
    stmt = (select(observations.c.obs_key, observations.c.batch_id,
                   observations.c.observed_at_us, observations.c.y, *xs)
            .where(day_range(model, day, day))
            .order_by(observations.c.observed_at_us, _by_key(conn)))
    rows = _fetch(conn, stmt)
    if not rows:
        return DayRows(np.zeros(0, dtype=object), np.zeros(0, np.int64), np.zeros(0, np.int64),
                       np.zeros((0, model.k)), np.zeros(0))
    columns = list(zip(*rows, strict=True))
    values = np.array(columns[3:], dtype=np.float64)  # (1 + k, n)
    return DayRows(np.array(columns[0], dtype=object), np.array(columns[1], dtype=np.int64),
                   np.array(columns[2], dtype=np.int64), np.ascontiguousarray(values[1:].T),
                   values[0])


def day_revision(conn: Connection, model: ModelRecord, day: date) -> int:
    """The day's ``day_stats.revision`` (0: no rows were ever stored for it)."""
    found = conn.execute(select(day_stats.c.revision).where(
        day_stats.c.model_id == model.id, day_stats.c.day == day)).scalar()
    return int(found or 0)


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


# writing ----------------------------------------------------------------------------------------
# Rows per SQLite statement: a power of two, so a chunk's rest splits into statements of halving
# sizes and a connection compiles at most 11 statements per row width, whatever the chunk sizes
# (the driver caches compiled statements by their text). An ingest of 1 M rows took 0.93 of the
# time with 999-row statements as with 199-row ones, and 0.91 with 6553-row ones, which cost
# 3.6 MB and 10 ms to compile each (tests/benchmarks/results/ingest.txt, fourth pass).
_SQLITE_ROWS = 1024


@dataclass(frozen=True, eq=False)
class PreparedRows:
    """Rows ready for the driver: distinct keys, their values as arrays and, for SQLite's
    multi-row INSERT, as Python values (key, time, day, y, x...) row after row in key order.

    Built by :func:`prepare_rows` (pure; can run ahead in another thread), stored by
    :func:`insert_observations`.
    """

    keys: NDArray[np.object_]
    observed_us: NDArray[np.int64]
    days: NDArray[np.datetime64]
    x: NDArray[np.float64]
    y: NDArray[np.float64]
    width: int  # values per row
    values: list[Any]  # width values per row, the rows in key order

    def __len__(self) -> int:
        return len(self.keys)

    def tuples(self) -> Iterator[tuple[Any, ...]]:
        """One tuple per row, in key order."""
        values = iter(self.values)
        return zip(*[values] * self.width, strict=True)


def keys_rising(keys: NDArray[np.object_]) -> bool:
    """Whether each key sorts after the one before (so the keys are distinct, and in the order
    SQLite stores them best): true of most files, and cheaper to find than to sort."""
    return len(keys) < 2 or bool((keys[1:] > keys[:-1]).all())


def prepare_rows(keys: NDArray[np.object_], observed_us: NDArray[np.int64],
                 days: NDArray[np.datetime64], x: NDArray[np.float64],
                 y: NDArray[np.float64]) -> PreparedRows:
    """The driver's values for these rows (``keys`` must be distinct)."""
    k, t, d, v, u = keys, observed_us, days, y, x
    if not keys_rising(keys):  # key order: see _insert_sqlite
        order = np.argsort(keys, kind="stable")
        k, t, d, v, u = keys[order], observed_us[order], days[order], y[order], x[order]
    columns = [k.tolist(), t.tolist(), _day_strings(d), v.tolist(),
               *(u[:, j].tolist() for j in range(u.shape[1]))]
    values = list(chain.from_iterable(zip(*columns, strict=True)))
    return PreparedRows(keys, observed_us, days, x, y, len(columns), values)


def insert_observations(conn: Connection, model: ModelRecord, batch_id: int,
                        rows: PreparedRows) -> InsertResult:
    """Store rows whose key is new for the model; report what is stored under the other keys
    (by other batches, or by this one in an earlier call).

    Runs inside the caller's transaction.
    """
    if len(rows) == 0:
        return _result(np.zeros(0, bool), rows.keys, [], model.k)
    if conn.dialect.name == "postgresql":
        return _insert_postgresql(conn, model, batch_id, rows)
    return _insert_sqlite(conn, model, batch_id, rows)


def _insert_sqlite(conn: Connection, model: ModelRecord, batch_id: int,
                   rows: PreparedRows) -> InsertResult:
    """Many rows per INSERT (``VALUES (...), (...), ...``), in key order.

    One statement run keeps its cursors on the table and both indexes open across its rows,
    where ``executemany`` of a one-row INSERT starts over for each row; with the rows in the
    order of the unique index, each one lands next to the one before. Measured on 300,000 rows
    (tests/benchmarks/results/ingest.txt): rows in time and key order cost about half the CPU
    of one-row statements; rows in random order cost half as much once sorted by key, and
    half again more unsorted. The rowids follow key order, so reads break ties of equal
    times by key, not by id. The model and the batch are the statement's parameters 1 and 2,
    so its text, and the driver's compiled copy of it, serve every model and batch.
    """
    names = ["obs_key", "observed_at_us", "day", "y", *predictor_columns(model.k)]
    lead = [int(model.id), int(batch_id)]
    stored = 0
    with driver_cursor(conn) as cursor:
        before = cursor.execute("SELECT max(id) FROM observations").fetchone()[0] or 0
        limit = driver_connection(conn).getlimit(sqlite3.SQLITE_LIMIT_VARIABLE_NUMBER)
        for size, starts in _statements(len(rows), rows.width, limit):
            cursor.executemany(
                f"INSERT INTO observations (model_id, batch_id, {', '.join(names)}) "
                f"VALUES {_values_sql(size, rows.width)} "
                "ON CONFLICT (model_id, obs_key) DO NOTHING",
                (lead + rows.values[start * rows.width:(start + size) * rows.width]
                 for start in starts))
            stored += cursor.rowcount
    keys = rows.keys
    if stored == len(keys):
        return _result(np.ones(len(keys), bool), keys, [], model.k)
    old = _stored_before(_stored_under(conn, model, keys), batch_id, before)
    return _result(~_member(keys, {row[0] for row in old}), keys, old, model.k)


def _statements(n: int, width: int, limit: int) -> Iterator[tuple[int, range]]:
    """How to store ``n`` rows of ``width`` values in statements of at most ``limit``
    parameters: (rows per statement, the first row of each), the sizes powers of two,
    largest first."""
    size = _SQLITE_ROWS
    while size > 1 and size * width + 2 > limit:
        size //= 2
    start = 0
    while start < n:
        count = (n - start) // size
        if count:
            yield size, range(start, start + count * size, size)
            start += count * size
        size //= 2


@cache
def _values_sql(size: int, width: int) -> str:
    """``size`` rows of ``(?1, ?2, ?, ...)``: the model and the batch, then ``width`` values."""
    return ", ".join([f"(?1, ?2, {', '.join('?' * width)})"] * size)


def _stored_before(found: list[tuple[Any, ...]], batch_id: int,
                   before: int) -> list[tuple[Any, ...]]:
    """Of the rows (key, id, batch_id, ...) found under some keys, those that were stored before
    the statement that stored this batch's rows with ids above ``before``: other batches' rows
    and this batch's earlier ones."""
    return [row for row in found if row[2] != batch_id or row[1] <= before]


_STAGE_SQL = (  # per transaction; x1..x8 covers every model (config.MAX_PREDICTORS)
    "CREATE TEMPORARY TABLE fitwatch_stage (pos integer, obs_key text, observed_at_us bigint, "
    "day date, y double precision, "
    + ", ".join(f"{name} double precision" for name in predictor_columns(8))
    + ") ON COMMIT DROP")


def _insert_postgresql(conn: Connection, model: ModelRecord, batch_id: int,
                       rows: PreparedRows) -> InsertResult:
    """Store the rows: straight into the table by COPY when none of their keys is stored yet
    (:func:`_copied_straight`); else COPY them into a temporary table, store the new ones with
    one INSERT ... ON CONFLICT DO NOTHING that only counts them, and only when some were not
    new, read what is stored under their keys (one index probe per row; a join that hashed the
    model's stored rows would read them all for every chunk).

    The rows found are those of other batches (stored before, or by another transaction that
    committed meanwhile: ON CONFLICT saw them) and this batch's rows from earlier chunks, told
    from the ones just stored by their ids, drawn after ``before``.
    """
    names = ["obs_key", "observed_at_us", "day", "y", *predictor_columns(model.k)]
    values = ", ".join(names)
    mid, bid = int(model.id), int(batch_id)
    with driver_cursor(conn) as cursor:
        if _copied_straight(cursor, mid, bid, values, rows):
            return _result(np.ones(len(rows.keys), bool), rows.keys, [], model.k)
        cursor.execute("SELECT to_regclass('pg_temp.fitwatch_stage')")
        if cursor.fetchone()[0] is None:
            cursor.execute(_STAGE_SQL)
        else:
            cursor.execute("TRUNCATE fitwatch_stage")
        with cursor.copy(f"COPY fitwatch_stage (pos, {values}) FROM STDIN "
                         "(FORMAT csv)") as copy:
            copy.write(_csv_block(rows))
        before = cursor.execute("SELECT max(id) FROM observations").fetchone()[0] or 0
        stored = cursor.execute(
            f"WITH stored AS (INSERT INTO observations (model_id, batch_id, {values}) "
            f"SELECT {mid}, {bid}, {values} FROM fitwatch_stage "
            "ON CONFLICT (model_id, obs_key) DO NOTHING RETURNING 1) "
            "SELECT count(*) FROM stored").fetchone()[0]
        found = []
        if stored < len(rows):
            xs = "".join(f", o.{c}" for c in predictor_columns(model.k))
            found = cursor.execute(
                f"SELECT s.pos, o.id, o.batch_id, o.observed_at_us, o.y{xs} "
                "FROM fitwatch_stage AS s CROSS JOIN LATERAL (SELECT * FROM observations "
                f"WHERE model_id = {mid} AND obs_key = s.obs_key) AS o "
                f"WHERE o.batch_id <> {bid} OR o.id <= {int(before)}").fetchall()
    keys = rows.keys
    if stored + len(found) != len(keys):  # a stored row vanished meanwhile (deleted by another
        raise StateError(  # transaction): a key would be neither stored nor counted
            f"rows of model '{model.name}' changed while ingesting; try again")
    if not found:
        return _result(np.ones(len(keys), bool), keys, [], model.k)
    old = [(keys[row[0]], *row[1:]) for row in found]
    return _result(~_member(keys, {row[0] for row in old}), keys, old, model.k)


_PROBED_KEYS = 64  # keys of a chunk looked up before it is copied straight into the table


def _copied_straight(cursor: Any, model_id: int, batch_id: int, values: str,
                     rows: PreparedRows) -> bool:
    """COPY the rows straight into ``observations`` when none of their keys is stored yet (the
    usual night: new rows only), which spares the staging table and the merge (1 M rows:
    ``tests/benchmarks/results/ingest.txt``). A few keys spread over the chunk (at most
    :data:`_PROBED_KEYS`, the first and last among them) are looked up first: a file that
    overlaps what is stored (an export of the last week, each night) then goes to the merge at
    once. Any other stored key, including one stored meanwhile by another transaction, makes
    the COPY fail on the unique key, and it is undone to its savepoint (looking up every key
    first cost more than the COPY saves). False: nothing was stored, take the merge."""
    import psycopg

    keys = rows.keys
    sample = keys[np.unique(np.linspace(0, len(keys) - 1, min(len(keys), _PROBED_KEYS))
                            .astype(np.intp))]
    cursor.execute("SELECT EXISTS (SELECT 1 FROM observations WHERE model_id = %s "
                   "AND obs_key = ANY(%s))", (model_id, sample.tolist()))
    if cursor.fetchone()[0]:
        return False
    cursor.execute("SAVEPOINT fitwatch_copy")
    try:
        with cursor.copy(f"COPY observations (model_id, batch_id, {values}) FROM STDIN "
                         "(FORMAT csv)") as copy:
            copy.write(_csv_block(rows, lead={"model_id": model_id, "batch_id": batch_id}))
    except psycopg.errors.UniqueViolation:
        cursor.execute("ROLLBACK TO SAVEPOINT fitwatch_copy")
        return False
    cursor.execute("RELEASE SAVEPOINT fitwatch_copy")
    return True


def _csv_block(rows: PreparedRows, lead: dict[str, int] | None = None) -> bytes:
    """The rows as CSV for COPY, written by Arrow (whose numbers read back to the same
    doubles: it writes the shortest text that does), with each row's position first, or
    instead the constant columns ``lead`` (name: value)."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    from monitor.columnar import from_numpy, from_strings

    first = ({"pos": from_numpy(np.arange(len(rows), dtype=np.int32))} if lead is None else
             {name: from_numpy(np.full(len(rows), value, dtype=np.int64))
              for name, value in lead.items()})
    table = pa.table({
        **first,
        "obs_key": from_strings(rows.keys),
        "observed_at_us": from_numpy(np.asarray(rows.observed_us, dtype=np.int64)),
        "day": from_numpy(np.asarray(rows.days, dtype="datetime64[D]")),
        "y": from_numpy(np.asarray(rows.y, dtype=np.float64)),
        **{name: from_numpy(np.asarray(rows.x[:, j], dtype=np.float64))
           for j, name in enumerate(predictor_columns(rows.x.shape[1]))},
    })
    sink = pa.BufferOutputStream()
    pacsv.write_csv(table, sink, pacsv.WriteOptions(include_header=False))
    return sink.getvalue().to_pybytes()


def _member(keys: NDArray[np.object_], chosen: set[str]) -> NDArray[np.bool_]:
    return np.fromiter((key in chosen for key in keys), dtype=bool, count=len(keys))


def _stored_under(conn: Connection, model: ModelRecord,
                  keys: NDArray[np.object_]) -> list[tuple[Any, ...]]:
    """(key, id, batch_id, observed_at_us, y, x...) of the stored rows with these keys."""
    xs = [observations.c[c] for c in predictor_columns(model.k)]
    stmt = select(observations.c.obs_key, observations.c.id, observations.c.batch_id,
                  observations.c.observed_at_us, observations.c.y, *xs).where(
        observations.c.model_id == model.id, _keyed(conn, keys))
    return _fetch(conn, stmt)


def _keyed(conn: Connection, keys: Sequence[str] | NDArray[np.object_]) -> Any:
    """``obs_key`` is one of ``keys``: one bound array (PostgreSQL) or JSON list (SQLite),
    whatever their number."""
    listed = list(keys.tolist() if isinstance(keys, np.ndarray) else keys)
    if conn.dialect.name == "postgresql":
        from sqlalchemy.dialects.postgresql import ARRAY

        return observations.c.obs_key == func.any(bindparam("keys", listed, type_=ARRAY(String)))
    each = func.json_each(bindparam("keys", json.dumps(listed))).table_valued("value")
    return observations.c.obs_key.in_(select(each.c.value))


def replace_observations(conn: Connection, model: ModelRecord, batch_id: int,
                         rows: PreparedRows, now: datetime) -> set[date]:
    """Give the stored rows under ``rows.keys`` the new values (an explicit correction).

    The values they had go to ``replaced_rows`` with this batch, and the rows now belong to it.
    Returns the days whose rows changed (where each row was and where it is now); their day
    statistics must be restated (:func:`restate_day_stats`). Runs in the caller's transaction.
    """
    if len(rows) == 0:
        return set()
    names = ["obs_key", "observed_at_us", "day", "y", *predictor_columns(model.k)]
    match = and_(observations.c.model_id == model.id, _keyed(conn, rows.keys))
    old_days = {r[0] for r in conn.execute(select(observations.c.day).where(match).distinct())}
    kept = ["obs_key", "observed_at_us", "day", "y", *predictor_columns(model.k)]
    conn.execute(replaced_rows.insert().from_select(
        ["model_id", "batch_id", "old_batch_id", *kept, "replaced_at"],
        select(observations.c.model_id, literal_column(str(int(batch_id))),
               observations.c.batch_id, *(observations.c[c] for c in kept),
               literal(now, UtcDateTime())).where(match)))
    values = [dict(zip([f"b_{n}" for n in names], row, strict=True)) for row in rows.tuples()]
    for item in values:
        item["b_day"] = date.fromisoformat(item["b_day"])
    conn.execute(update(observations)
                 .where(observations.c.model_id == model.id,
                        observations.c.obs_key == bindparam("b_obs_key"))
                 .values(batch_id=batch_id, **{n: bindparam(f"b_{n}") for n in names[1:]}),
                 values)
    return old_days | {item["b_day"] for item in values}


def undo_replacements(conn: Connection, model: ModelRecord, batch_id: int) -> None:
    """Put back the values a batch replaced (its file was rejected whole after all)."""
    names = ["old_batch_id", "observed_at_us", "day", "y", *predictor_columns(model.k)]
    kept = conn.execute(select(replaced_rows.c.obs_key, *(replaced_rows.c[n] for n in names))
                        .where(replaced_rows.c.batch_id == batch_id)).all()
    if not kept:
        return
    conn.execute(update(observations)
                 .where(observations.c.model_id == model.id,
                        observations.c.obs_key == bindparam("b_obs_key"))
                 .values(batch_id=bindparam("b_old_batch_id"),
                         **{n: bindparam(f"b_{n}") for n in names[1:]}),
                 [dict(zip(["b_obs_key", *(f"b_{n}" for n in names)], row, strict=True))
                  for row in kept])
    conn.execute(replaced_rows.delete().where(replaced_rows.c.batch_id == batch_id))


def restate_day_stats(conn: Connection, model: ModelRecord, days: set[date],
                      now: datetime) -> None:
    """Recompute these days' statistics from their stored rows (after a correction moved or
    changed rows), each with a new revision so that a checked day is checked again; a day left
    without rows loses its statistics, and its check is marked stale outright (revision -1,
    which no revision equals: a day that gets rows again starts over at revision 1)."""
    if not days:
        return
    stored = {row.day: int(row.revision) for row in conn.execute(
        select(day_stats.c.day, day_stats.c.revision).where(
            day_stats.c.model_id == model.id, day_stats.c.day.in_(sorted(days))))}
    rows = load_observations(conn, model, min(days), max(days))  # one query for them all
    moments = DayMoments.from_rows(rows.days, np.column_stack([rows.x, rows.y]))
    index = {d.item(): i for i, d in enumerate(np.asarray(moments.days, dtype="datetime64[D]"))}
    for day in sorted(days):
        where = and_(day_stats.c.model_id == model.id, day_stats.c.day == day)
        if day not in index:
            conn.execute(day_stats.delete().where(where))
            conn.execute(update(day_checks).where(day_checks.c.model_id == model.id,
                                                  day_checks.c.day == day)
                         .values(stats_revision=-1))
            continue
        part = moments.day(index[day])
        revision = stored.get(day, 0) + 1
        if day in stored:
            conn.execute(update(day_stats).where(where).values(
                n=part.n, moments=part.to_dict(), revision=revision, updated_at=now))
        else:
            conn.execute(day_stats.insert().values(model_id=model.id, day=day, n=part.n,
                                                   moments=part.to_dict(), revision=revision,
                                                   updated_at=now))


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
def _by_key(conn: Connection) -> Any:
    """``obs_key`` in code point order on either backend (SQLite compares text bytewise; a
    PostgreSQL database may have a locale's collation), so rows of equal times are read in the
    same order from both."""
    if conn.dialect.name == "postgresql":
        return observations.c.obs_key.collate("C")
    return observations.c.obs_key


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
