"""Which stored checks the alerts have considered: ``queued_nights``, one row per (model, night).

A check with no row here is news not yet queued, whoever stored it and whatever happened to
that process afterwards. The rows are written in the transaction that queues the night's
messages, so a crash leaves either both or neither.
"""

from __future__ import annotations

from collections.abc import Iterable
from datetime import date, datetime

from sqlalchemy import Connection, and_, func, literal, select
from sqlalchemy.sql.expression import Join

from monitor.store.schema import day_checks, queued_nights
from monitor.store.upsert import insert_for


def _unqueued() -> Join:
    return day_checks.outerjoin(queued_nights, and_(
        queued_nights.c.model_id == day_checks.c.model_id,
        queued_nights.c.day == day_checks.c.day))


def pending_nights(conn: Connection, through: date | None = None) -> list[date]:
    """Checked nights with at least one model's check not yet queued, oldest first."""
    query = (select(day_checks.c.day).distinct().select_from(_unqueued())
             .where(queued_nights.c.day.is_(None)).order_by(day_checks.c.day))
    if through is not None:
        query = query.where(day_checks.c.day <= through)
    return [r[0] for r in conn.execute(query)]


def pending_models(conn: Connection, night: date) -> set[int]:
    """Models whose check of ``night`` is not yet queued."""
    query = (select(day_checks.c.model_id).select_from(_unqueued())
             .where(day_checks.c.day == night, queued_nights.c.day.is_(None)))
    return {int(r[0]) for r in conn.execute(query)}


def mark_queued(conn: Connection, model_ids: Iterable[int], night: date, now: datetime) -> None:
    """Record that these models' checks of ``night`` were queued (a repeat is ignored)."""
    values = [{"model_id": m, "day": night, "queued_at": now} for m in sorted(set(model_ids))]
    if not values:
        return
    conn.execute(insert_for(conn, queued_nights).values(values).on_conflict_do_nothing(
        index_elements=[queued_nights.c.model_id, queued_nights.c.day]))


def mark_older_queued(conn: Connection, before: date, now: datetime) -> int:
    """Record every check of a night before ``before`` not yet queued as queued (without a
    message: past the catch-up horizon); returns how many checks that was."""
    unqueued = (select(day_checks.c.model_id, day_checks.c.day, literal(now))
                .select_from(_unqueued())
                .where(queued_nights.c.day.is_(None), day_checks.c.day < before))
    result = conn.execute(insert_for(conn, queued_nights).from_select(
        ["model_id", "day", "queued_at"], unqueued).on_conflict_do_nothing(
        index_elements=[queued_nights.c.model_id, queued_nights.c.day]))
    return int(result.rowcount or 0)


def last_queued_at(conn: Connection, model_id: int, before: date) -> datetime | None:
    """When the model's latest night before ``before`` was queued (None: never)."""
    return conn.execute(select(func.max(queued_nights.c.queued_at)).where(
        queued_nights.c.model_id == model_id, queued_nights.c.day < before)).scalar()
