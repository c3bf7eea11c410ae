"""Which days of a model have rows, and when the latest arrived: reads of the day statistics'
row counts and of two columns of the observations, for the views that only place a model in
time (``status``, the data findings). Nothing here reads rows or their statistics, so it needs
no numpy (``monitor.store.observations`` holds the array reads and the writes).
"""

from __future__ import annotations

from collections.abc import Iterable
from datetime import UTC, date, datetime, timedelta
from typing import Any

from sqlalchemy import Connection, and_, func, select

from monitor.domain.model import ModelRecord
from monitor.store.engine import id_chunks
from monitor.store.schema import day_stats, observations

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


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


def neighbour_days(conn: Connection, model: ModelRecord, day: date
                   ) -> tuple[date | None, date | None]:
    """The nearest days before and after ``day`` that have stored rows (None: there is none)."""
    has_rows = (day_stats.c.model_id == model.id, day_stats.c.n > 0)
    before = conn.execute(select(func.max(day_stats.c.day))
                          .where(*has_rows, day_stats.c.day < day)).scalar()
    after = conn.execute(select(func.min(day_stats.c.day))
                         .where(*has_rows, day_stats.c.day > day)).scalar()
    return before, after


def first_day_with_rows(conn: Connection, model: ModelRecord) -> date | None:
    """The earliest day of ``model`` that has stored rows, or None."""
    return conn.execute(select(func.min(day_stats.c.day)).where(
        day_stats.c.model_id == model.id, day_stats.c.n > 0)).scalar()


def last_day_with_rows(conn: Connection, model: ModelRecord, through: date) -> date | None:
    """The latest day of ``model`` on or before ``through`` that has stored rows, or None."""
    return conn.execute(select(func.max(day_stats.c.day)).where(
        day_stats.c.model_id == model.id, day_stats.c.n > 0,
        day_stats.c.day <= through)).scalar()


def last_days_with_rows(conn: Connection, model_ids: Iterable[int],
                        through: date) -> dict[int, date]:
    """:func:`last_day_with_rows` of many models at once, by id (models without one left
    out)."""
    out: dict[int, date] = {}
    for ids in id_chunks(model_ids):
        rows = conn.execute(select(day_stats.c.model_id, func.max(day_stats.c.day)).where(
            day_stats.c.model_id.in_(ids), day_stats.c.n > 0, day_stats.c.day <= through)
            .group_by(day_stats.c.model_id))
        out.update((int(model_id), day) for model_id, day in rows)
    return out


def last_observed_at(conn: Connection, model: ModelRecord) -> datetime | None:
    """The latest stored observation time of ``model`` (UTC), or None."""
    last_day = conn.execute(select(func.max(observations.c.day))
                            .where(observations.c.model_id == model.id)).scalar()
    if last_day is None:
        return None
    latest = conn.execute(select(func.max(observations.c.observed_at_us)).where(
        day_range(model, last_day - timedelta(days=1), None))).scalar()
    return None if latest is None else _EPOCH + timedelta(microseconds=int(latest))


def count_observations(conn: Connection, model: ModelRecord) -> int:
    return int(conn.execute(select(func.count()).select_from(observations)
                            .where(observations.c.model_id == model.id)).scalar_one())


def day_range(model: ModelRecord, first_day: date | None, last_day: date | None) -> Any:
    """The rows of ``model`` from ``first_day`` through ``last_day`` (None: unbounded)."""
    clauses = [observations.c.model_id == model.id]
    if first_day is not None:
        clauses.append(observations.c.day >= first_day)
    if last_day is not None:
        clauses.append(observations.c.day <= last_day)
    return and_(*clauses)
