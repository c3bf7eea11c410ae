"""The audit log: who fitted, imported, promoted, rolled back or acknowledged what, when, why;
and which nightly work failed (action ``failure``)."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime
from typing import Any
from zoneinfo import ZoneInfo

from sqlalchemy import Connection, insert, select

from monitor.domain.action import RESTART_ACTIONS, Action
from monitor.domain.days import local_day
from monitor.store.schema import audit_log, inserted_id, jsonable

ACTIONS = ("fit", "import", "promote", "rollback", "ack", "failure", "rename", "delete")


@dataclass(frozen=True)
class AuditEntry:
    id: int
    at: datetime
    model_id: int | None
    action: str
    actor: str
    reason: str | None
    version_id: int | None
    effective_day: date | None
    details: dict[str, Any]


def record(conn: Connection, *, action: str, actor: str, at: datetime, model_id: int | None,
           reason: str | None = None, version_id: int | None = None,
           effective_day: date | None = None, details: dict[str, Any] | None = None) -> int:
    if action not in ACTIONS:
        raise ValueError(f"unknown audit action {action!r}")
    result = conn.execute(insert(audit_log).values(
        at=at, model_id=model_id, action=action, actor=actor, reason=reason,
        version_id=version_id, effective_day=effective_day, details=jsonable(details or {})))
    return inserted_id(result)


def entries(conn: Connection, model_id: int, actions: tuple[str, ...] = ACTIONS,
            from_day: date | None = None) -> list[AuditEntry]:
    query = select(audit_log).where(audit_log.c.model_id == model_id,
                                    audit_log.c.action.in_(actions))
    if from_day is not None:
        query = query.where(audit_log.c.effective_day >= from_day)
    rows = conn.execute(query.order_by(audit_log.c.at, audit_log.c.id))
    return [AuditEntry(**{k: r._mapping[k] for k in AuditEntry.__dataclass_fields__})
            for r in rows]


def actions(conn: Connection, model_id: int, from_day: date,
            zone: ZoneInfo | None = None) -> list[Action]:
    """The promotions, rollbacks and acknowledgements taking effect on ``from_day`` or later,
    in the order they were recorded (``zone``: the local day each was recorded on)."""
    out = []
    for e in entries(conn, model_id, RESTART_ACTIONS, from_day=from_day):
        details = e.details or {}
        assert e.effective_day is not None  # every restart action has one
        out.append(Action(e.action, e.effective_day, e.actor, e.reason, details.get("version"),
                          details.get("previous"), details.get("copy_of"),
                          local_day(e.at, zone) if zone is not None else None))
    return out
