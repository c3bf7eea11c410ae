"""The audit log: who fitted, imported, promoted, rolled back or acknowledged what, when, why;
which nightly work failed (action ``failure``); and which raw rows retention deleted (``prune``)."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import date, datetime
from typing import Any
from zoneinfo import ZoneInfo

from sqlalchemy import Connection, insert, select

from monitor.domain.action import RESTART_ACTIONS, Action
from monitor.domain.days import local_day
from monitor.store.engine import id_chunks
from monitor.store.schema import audit_log, inserted_id, jsonable, models, versions

ACTIONS = ("fit", "import", "promote", "rollback", "ack", "failure", "rename", "delete",
           "correct", "prune")


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


@dataclass(frozen=True)
class LogLine:
    """One entry of the audit log as ``fitwatch audit`` shows it: with the model's name and the
    version's number (a deleted model's entries keep the name they were recorded under)."""

    id: int
    at: datetime
    model: str | None
    action: str
    actor: str
    reason: str | None
    version: int | None
    effective_day: date | None
    details: dict[str, Any]


def log_lines(conn: Connection, model: str | None = None, since: datetime | None = None,
              limit: int | None = None) -> list[LogLine]:
    """The audit log, oldest first; only ``model``'s entries when given (the model known by that
    name now, or once: renamed or deleted since), only from ``since``; the latest ``limit``."""
    query = (select(audit_log, models.c.name.label("model_name"),
                    versions.c.number.label("version_number"))
             .select_from(audit_log.outerjoin(models, audit_log.c.model_id == models.c.id)
                          .outerjoin(versions, audit_log.c.version_id == versions.c.id)))
    if since is not None:
        query = query.where(audit_log.c.at >= since)
    rows = conn.execute(query.order_by(audit_log.c.at.desc(), audit_log.c.id.desc())).all()
    names = {model}
    renames = [r.details for r in conn.execute(select(audit_log.c.details)
                                               .where(audit_log.c.action == "rename"))]
    while True:  # the names the model went by later (entries show the latest)
        later = {d.get("to") for d in renames if d and d.get("from") in names} - names
        if not later:
            break
        names |= later
    out = []
    for r in rows:
        m = r._mapping
        details = dict(m["details"] or {})
        name = m["model_name"] or details.get("model")
        if model is not None and name not in names:
            continue
        number = m["version_number"]
        if number is None and isinstance(details.get("version"), int):
            number = details["version"]
        out.append(LogLine(m["id"], m["at"], name, m["action"], m["actor"], m["reason"], number,
                           m["effective_day"], details))
        if limit is not None and len(out) >= limit:
            break
    return out[::-1]


def detach(conn: Connection, model_id: int, name: str) -> None:
    """Keep ``model_id``'s entries, with its name, once the model and its versions are gone."""
    rows = conn.execute(select(audit_log.c.id, audit_log.c.details, versions.c.number)
                        .select_from(audit_log.outerjoin(
                            versions, audit_log.c.version_id == versions.c.id))
                        .where(audit_log.c.model_id == model_id)).all()
    for entry_id, details, number in rows:
        kept = {**(details or {}), "model": name}
        if number is not None:
            kept.setdefault("version", number)
        conn.execute(audit_log.update().where(audit_log.c.id == entry_id)
                     .values(model_id=None, version_id=None, details=jsonable(kept)))


def actions(conn: Connection, model_id: int, from_day: date,
            zone: ZoneInfo | None = None) -> list[Action]:
    """The promotions, rollbacks and acknowledgements taking effect on ``from_day`` or later,
    in the order they were recorded (``zone``: the local day each was recorded on)."""
    return [_action(e, zone) for e in entries(conn, model_id, RESTART_ACTIONS,
                                              from_day=from_day)]


def actions_on(conn: Connection, model_ids: Iterable[int], day: date) -> dict[int, list[Action]]:
    """The promotions, rollbacks and acknowledgements taking effect on ``day``, of many models
    at once, by model id in the order they were recorded (models without any left out)."""
    out: dict[int, list[Action]] = {}
    for ids in id_chunks(model_ids):
        rows = conn.execute(select(audit_log).where(
            audit_log.c.model_id.in_(ids), audit_log.c.action.in_(list(RESTART_ACTIONS)),
            audit_log.c.effective_day == day).order_by(audit_log.c.at, audit_log.c.id))
        for r in rows:
            entry = AuditEntry(**{k: r._mapping[k] for k in AuditEntry.__dataclass_fields__})
            assert entry.model_id is not None
            out.setdefault(entry.model_id, []).append(_action(entry, None))
    return out


def _action(e: AuditEntry, zone: ZoneInfo | None) -> Action:
    details = e.details or {}
    assert e.effective_day is not None  # every restart action has one
    return Action(e.action, e.effective_day, e.actor, e.reason, details.get("version"),
                  details.get("previous"), details.get("copy_of"),
                  local_day(e.at, zone) if zone is not None else None)
