"""Stored day checks: one row per model and day, every figure of the check plus its state.

:func:`_row` and :func:`_check` are the one place where a :class:`~monitor.domain.check.DayCheck`
meets the ``day_checks`` columns; its details and the state handed to the next day are JSON
documents written and read with :mod:`monitor.domain.codec`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import fields
from datetime import date
from typing import Any

from sqlalchemy import Connection, and_, delete, func, insert, select

from monitor.domain.check import CheckDetails, CheckState, DayCheck
from monitor.domain.codec import decode, encode
from monitor.domain.status import Status
from monitor.store.engine import id_chunks
from monitor.store.schema import day_checks, day_stats

_COLUMNS = tuple(f.name for f in fields(DayCheck) if f.name != "model")
_TYPED = {"details": CheckDetails, "state": CheckState}


def _row(check: DayCheck) -> dict[str, Any]:
    values = {name: getattr(check, name) for name in _COLUMNS}
    for name, value in values.items():
        if name in _TYPED or name == "reasons":
            values[name] = encode(value)
        elif isinstance(value, float) and not math.isfinite(value):
            values[name] = None
    values["status"] = check.status.value
    return values


def _check(row: Any, model: str = "") -> DayCheck:
    m = row._mapping
    values = {name: m[name] for name in _COLUMNS}
    values["reasons"] = tuple(values["reasons"])
    values["status"] = Status(values["status"])
    for name, kind in _TYPED.items():
        values[name] = decode(kind, values[name] or {})
    return DayCheck(**values, model=model)


def insert_checks(conn: Connection, checks: list[DayCheck]) -> None:
    if checks:
        conn.execute(insert(day_checks), [_row(c) for c in checks])


def delete_checks_from(conn: Connection, model_id: int, first_day: date) -> int:
    result = conn.execute(delete(day_checks).where(day_checks.c.model_id == model_id,
                                                   day_checks.c.day >= first_day))
    return int(result.rowcount or 0)


def load_checks(conn: Connection, model_id: int, first_day: date | None = None,
                last_day: date | None = None, model: str = "") -> list[DayCheck]:
    query = select(day_checks).where(day_checks.c.model_id == model_id)
    if first_day is not None:
        query = query.where(day_checks.c.day >= first_day)
    if last_day is not None:
        query = query.where(day_checks.c.day <= last_day)
    return [_check(r, model) for r in conn.execute(query.order_by(day_checks.c.day))]


def last_check(conn: Connection, model_id: int, before: date | None = None,
               model: str = "") -> DayCheck | None:
    query = select(day_checks).where(day_checks.c.model_id == model_id)
    if before is not None:
        query = query.where(day_checks.c.day < before)
    row = conn.execute(query.order_by(day_checks.c.day.desc()).limit(1)).first()
    return _check(row, model) if row is not None else None


def checks_on(conn: Connection, day: date, names: Mapping[int, str]) -> dict[int, DayCheck]:
    """The check of ``day`` of each model in ``names`` (id -> name) that has one, by id."""
    out: dict[int, DayCheck] = {}
    for ids in id_chunks(names):
        rows = conn.execute(select(day_checks).where(
            day_checks.c.day == day, day_checks.c.model_id.in_(ids)))
        out.update((r.model_id, _check(r, names[r.model_id])) for r in rows)
    return out


def last_checks_before(conn: Connection, day: date,
                       names: Mapping[int, str]) -> dict[int, DayCheck]:
    """Each model's latest check before ``day`` (what :func:`last_check` gives one model), by
    id, for the models in ``names`` that have one: one query per chunk of models."""
    out: dict[int, DayCheck] = {}
    for ids in id_chunks(names):
        latest = (select(day_checks.c.model_id, func.max(day_checks.c.day).label("day"))
                  .where(day_checks.c.day < day, day_checks.c.model_id.in_(ids))
                  .group_by(day_checks.c.model_id).subquery())
        rows = conn.execute(select(day_checks).join(latest, and_(
            day_checks.c.model_id == latest.c.model_id, day_checks.c.day == latest.c.day)))
        out.update((r.model_id, _check(r, names[r.model_id])) for r in rows)
    return out


def models_checked_on(conn: Connection, day: date) -> int:
    """How many models have a check of ``day``."""
    query = select(func.count()).select_from(day_checks).where(day_checks.c.day == day)
    return int(conn.execute(query).scalar_one())


def earliest_stale_day(conn: Connection, model_id: int) -> date | None:
    """The first checked day whose observations changed after it was checked.

    A day is stale when its rows changed later (rows arrived, or a correction changed, moved or
    took them away): its ``day_stats.revision`` (0 when it has none) no longer equals the
    revision the check saw (a day checked empty saw revision 0).
    """
    joined = day_checks.outerjoin(day_stats, and_(day_checks.c.model_id == day_stats.c.model_id,
                                                  day_checks.c.day == day_stats.c.day))
    query = (select(func.min(day_checks.c.day)).select_from(joined)
             .where(day_checks.c.model_id == model_id,
                    day_checks.c.stats_revision != func.coalesce(day_stats.c.revision, 0)))
    return conn.execute(query).scalar()
