"""Retention of raw observations: which days may lose their rows, deleting them, and where the
kept rows begin.

Only ``observations`` and ``replaced_rows`` are pruned; day statistics, checks, versions,
batches (with their rejected rows) and the audit log stay. Each prune is an audit entry
(action ``prune``) whose ``details["through"]`` is the last day pruned; the latest one says from
which day on rows are kept (:func:`kept_from`), which ingest uses to refuse late rows for a
pruned day and ``rows``, ``refit`` and ``compare`` use to say why rows are missing.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime, timedelta

from sqlalchemy import Connection, func, select

from monitor.store.schema import audit_log, observations, replaced_rows


@dataclass(frozen=True)
class Prunable:
    """What a prune of one model would delete: rows on days ``first..through``."""

    through: date | None  # the last day that may lose its rows (None: none may)
    first: date | None = None  # the oldest day that still has rows, when it is <= through
    rows: int = 0
    replaced_rows: int = 0
    days: int = 0
    why_not: str = ""  # when nothing may go: why


def prunable(conn: Connection, model_id: int, *, keep_days: int | None,
             before: date | None = None) -> Prunable:
    """The rows of ``model_id`` that may go: days older than ``keep_days`` counted back from the
    last checked day (the last ``keep_days`` checked days keep their rows), or before
    ``before``; never a day not checked yet, nor one whose check is stale (rows arrived or
    changed after it was checked: the next check scores it again from its rows)."""
    from monitor.store.checks import earliest_stale_day, last_check  # loads the check domain

    last = last_check(conn, model_id)
    if last is None:
        return Prunable(None, why_not="not checked yet")
    limits = [last.day]
    if keep_days is not None:
        limits.append(last.day - timedelta(days=keep_days))
    if before is not None:
        limits.append(before - timedelta(days=1))
    stale = earliest_stale_day(conn, model_id)
    if stale is not None:
        limits.append(stale - timedelta(days=1))
    through = min(limits)
    first = conn.execute(select(func.min(observations.c.day)).where(
        observations.c.model_id == model_id)).scalar()
    if first is None or first > through:
        return Prunable(through, why_not=f"no rows on or before {through.isoformat()}")
    where = (observations.c.model_id == model_id, observations.c.day <= through)
    rows, days = conn.execute(select(func.count(), func.count(observations.c.day.distinct()))
                              .where(*where)).one()
    replaced = conn.execute(select(func.count()).select_from(replaced_rows).where(
        replaced_rows.c.model_id == model_id, replaced_rows.c.day <= through)).scalar_one()
    return Prunable(through, first, int(rows), int(replaced), int(days))


def delete_rows_through(conn: Connection, model_id: int, through: date) -> tuple[int, int]:
    """Delete the model's observations and replaced rows on days up to ``through`` (in the
    caller's transaction); returns how many of each went."""
    rows = conn.execute(observations.delete().where(observations.c.model_id == model_id,
                                                    observations.c.day <= through))
    replaced = conn.execute(replaced_rows.delete().where(replaced_rows.c.model_id == model_id,
                                                         replaced_rows.c.day <= through))
    return int(rows.rowcount or 0), int(replaced.rowcount or 0)


@dataclass(frozen=True)
class Pruned:
    """The latest prune of a model: rows on days up to ``through`` are gone since ``at``."""

    through: date
    at: datetime

    @property
    def kept_from(self) -> date:
        return self.through + timedelta(days=1)


def last_prune(conn: Connection, model_id: int) -> Pruned | None:
    """The model's latest prune (its ``through`` only ever grows), or None."""
    row = conn.execute(select(audit_log.c.at, audit_log.c.details)
                       .where(audit_log.c.model_id == model_id, audit_log.c.action == "prune")
                       .order_by(audit_log.c.id.desc()).limit(1)).first()
    if row is None or not (row.details or {}).get("through"):
        return None
    return Pruned(date.fromisoformat(row.details["through"]), row.at)


def kept_from(conn: Connection, model_id: int) -> date | None:
    """The first day whose rows are kept (None: no rows were ever pruned)."""
    pruned = last_prune(conn, model_id)
    return pruned.kept_from if pruned is not None else None


def pruned_on(conn: Connection, model_id: int, day: date) -> datetime | None:
    """When the rows of ``day`` were pruned (the first prune that reached it), or None."""
    rows = conn.execute(select(audit_log.c.at, audit_log.c.details)
                        .where(audit_log.c.model_id == model_id, audit_log.c.action == "prune")
                        .order_by(audit_log.c.id)).all()
    for row in rows:
        through = (row.details or {}).get("through")
        if through and date.fromisoformat(through) >= day:
            return row.at
    return None
