"""Batches (one per ingested file or query run) and the rows they rejected."""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import date, datetime

from sqlalchemy import Connection, RowMapping, bindparam, literal_column, select

from monitor.errors import NotFoundError
from monitor.store.engine import driver_cursor, id_chunks
from monitor.store.schema import batches, inserted_id, rejected_rows


@dataclass(frozen=True)
class BatchRecord:
    id: int
    model_id: int
    source: str
    file_hash: str | None
    file_size: int | None
    strict: bool
    status: str  # complete | rejected
    read: int
    accepted: int
    duplicates: int
    rejected: int
    reasons: dict[str, int]
    first_day: date | None
    last_day: date | None
    started_at: datetime
    finished_at: datetime | None


@dataclass(frozen=True)
class RejectedRow:
    line: int
    raw: str
    reason: str
    detail: str


def start_batch(conn: Connection, model_id: int, source: str, file_hash: str | None,
                file_size: int | None, strict: bool, now: datetime) -> int:
    """Open a batch row (finished by :func:`finish_batch` in the same transaction)."""
    result = conn.execute(batches.insert().values(
        model_id=model_id, source=source, file_hash=file_hash, file_size=file_size,
        strict=strict, status="open", read=0, accepted=0, duplicates=0, rejected=0, reasons={},
        started_at=now))
    return inserted_id(result)


def finish_batch(conn: Connection, batch_id: int, *, status: str, read: int, accepted: int,
                 duplicates: int, rejected: int, reasons: Mapping[str, int],
                 first_day: date | None, last_day: date | None, file_hash: str | None,
                 now: datetime) -> None:
    if read != accepted + duplicates + rejected:
        raise ValueError(f"batch {batch_id} does not balance: read {read} != {accepted} + "
                         f"{duplicates} + {rejected}")
    conn.execute(batches.update().where(batches.c.id == batch_id).values(
        status=status, read=read, accepted=accepted, duplicates=duplicates, rejected=rejected,
        reasons=dict(reasons), first_day=first_day, last_day=last_day, file_hash=file_hash,
        finished_at=now))


def get_batch(conn: Connection, batch_id: int) -> BatchRecord:
    row = conn.execute(select(batches).where(batches.c.id == batch_id)).first()
    if row is None:
        raise NotFoundError(f"no batch {batch_id}")
    return _record(row._mapping)


def list_batches(conn: Connection, model_id: int) -> list[BatchRecord]:
    rows = conn.execute(select(batches).where(batches.c.model_id == model_id)
                        .order_by(batches.c.id))
    return [_record(row._mapping) for row in rows]


def batches_started_between(conn: Connection, model_id: int, start: datetime,
                            end: datetime) -> list[BatchRecord]:
    """The model's batches started at ``start <= started_at < end``, oldest first."""
    rows = conn.execute(select(batches).where(
        batches.c.model_id == model_id, batches.c.started_at >= start,
        batches.c.started_at < end).order_by(batches.c.id))
    return [_record(row._mapping) for row in rows]


def find_batches_by_hash(conn: Connection, model_id: int, file_hash: str) -> list[BatchRecord]:
    """Finished batches of the model with this content hash, newest first."""
    rows = conn.execute(select(batches).where(
        batches.c.model_id == model_id, batches.c.file_hash == file_hash,
        batches.c.status != "open").order_by(batches.c.id.desc()))
    return [_record(row._mapping) for row in rows]


def batches_between(conn: Connection, model_id: int, start: datetime,
                    end: datetime) -> list[BatchRecord]:
    """Finished batches of the model started from ``start`` through ``end``, oldest first."""
    rows = conn.execute(select(batches).where(
        batches.c.model_id == model_id, batches.c.status != "open",
        batches.c.started_at >= start, batches.c.started_at <= end).order_by(batches.c.id))
    return [_record(row._mapping) for row in rows]


def batches_between_for(conn: Connection, model_ids: Iterable[int], start: datetime,
                        end: datetime) -> dict[int, list[BatchRecord]]:
    """:func:`batches_between` of many models at once, by model id (models without any left
    out)."""
    out: dict[int, list[BatchRecord]] = {}
    for ids in id_chunks(model_ids):
        rows = conn.execute(select(batches).where(
            batches.c.model_id.in_(ids), batches.c.status != "open",
            batches.c.started_at >= start, batches.c.started_at <= end).order_by(batches.c.id))
        for row in rows:
            record = _record(row._mapping)
            out.setdefault(int(row.model_id), []).append(record)
    return out


def first_rejected_row(conn: Connection, batch_ids: Sequence[int],
                       reason: str) -> tuple[int, RejectedRow] | None:
    """The first row rejected for ``reason`` in the newest of ``batch_ids`` that has one, with
    that batch's id."""
    if not batch_ids:
        return None
    row = conn.execute(
        select(rejected_rows.c.batch_id, rejected_rows.c.line, rejected_rows.c.raw,
               rejected_rows.c.reason, rejected_rows.c.detail)
        .where(rejected_rows.c.batch_id.in_(list(batch_ids)), rejected_rows.c.reason == reason)
        .order_by(rejected_rows.c.batch_id.desc(), rejected_rows.c.line, rejected_rows.c.id)
        .limit(1)).first()
    if row is None:
        return None
    return int(row.batch_id), RejectedRow(int(row.line), row.raw, row.reason, row.detail)


def add_rejected_rows(conn: Connection, batch_id: int,
                      rows: Sequence[tuple[int, str, str, str]]) -> None:
    """Record rejected rows as (line, raw text, reason code, detail)."""
    if not rows:
        return
    clean = [(line, _text(raw), reason, _text(detail)) for line, raw, reason, detail in rows]
    with driver_cursor(conn) as cursor:
        if conn.dialect.name == "postgresql":
            with cursor.copy("COPY rejected_rows (batch_id, line, raw, reason, detail) "
                             "FROM STDIN") as copy:
                for row in clean:
                    copy.write_row((batch_id, *row))
        else:
            names = ("line", "raw", "reason", "detail")
            stmt = rejected_rows.insert().values(
                batch_id=literal_column(str(int(batch_id))),
                **{name: bindparam(name) for name in names}).compile(dialect=conn.dialect)
            order = [names.index(name) for name in stmt.positiontup or []]
            cursor.executemany(str(stmt), [tuple(row[i] for i in order) for row in clean])


def rejected_rows_of(conn: Connection, batch_id: int) -> list[RejectedRow]:
    rows = conn.execute(select(rejected_rows.c.line, rejected_rows.c.raw, rejected_rows.c.reason,
                               rejected_rows.c.detail)
                        .where(rejected_rows.c.batch_id == batch_id)
                        .order_by(rejected_rows.c.line, rejected_rows.c.id))
    return [RejectedRow(int(r.line), r.raw, r.reason, r.detail) for r in rows]


def _text(value: str) -> str:
    return value.replace("\x00", "\\0")  # PostgreSQL text cannot hold NUL


def _record(m: RowMapping) -> BatchRecord:
    return BatchRecord(
        id=m["id"], model_id=m["model_id"], source=m["source"], file_hash=m["file_hash"],
        file_size=m["file_size"], strict=bool(m["strict"]), status=m["status"], read=m["read"],
        accepted=m["accepted"], duplicates=m["duplicates"], rejected=m["rejected"],
        reasons=dict(m["reasons"] or {}), first_day=m["first_day"], last_day=m["last_day"],
        started_at=m["started_at"], finished_at=m["finished_at"])
