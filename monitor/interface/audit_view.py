"""``fitwatch audit``: what was done to the models, by whom, when and why, in plain lines."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime
from typing import Any
from zoneinfo import ZoneInfo

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.days import local_time
from monitor.domain.phrasing import counted
from monitor.store.access import database
from monitor.store.audit import LogLine, log_lines
from monitor.store.models import get_model


@dataclass(frozen=True)
class AuditListing:
    lines: tuple[LogLine, ...]
    zone: ZoneInfo
    model: str | None

    def text(self) -> str:
        if not self.lines:
            return f"nothing recorded for '{self.model}'" if self.model else "nothing recorded"
        return "\n".join(_line(e, self.zone) for e in self.lines)

    def as_dict(self) -> list[dict[str, Any]]:
        return [{"at": e.at, "model": e.model, "action": e.action, "actor": e.actor,
                 "version": e.version, "effective_day": e.effective_day, "reason": e.reason,
                 "what": what_was_done(e), "details": e.details} for e in self.lines]


def audit_listing(settings: Settings, name: str | None = None, *, since: date | None = None,
                  last: int | None = None, engine: Engine | None = None) -> AuditListing:
    """The audit log (of one model, when named; it may have been deleted since)."""
    zone = settings.timezone
    start = datetime.combine(since, datetime.min.time(), zone) if since else None
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        lines = log_lines(conn, name, start, last)
        if name is not None and not lines:
            get_model(conn, name)  # never heard of: say so (NotFoundError)
    return AuditListing(tuple(lines), zone, name)


def what_was_done(e: LogLine) -> str:
    """The entry in words of the model's own history."""
    d = e.details
    version = f"version {e.version}" if e.version is not None else "a version"
    if e.action == "fit":
        window = d.get("window") or []
        on = f" on {window[0]} to {window[1]}" if len(window) == 2 else ""
        return f"fitted {version}{on} ({d.get('state', '?')})"
    if e.action == "import":
        return f"imported {version} from {d.get('file', '?')}"
    if e.action == "promote":
        was = f" in place of version {d['previous']}" if "previous" in d else ""
        return f"promoted {version}{was}"
    if e.action == "rollback":
        back = f"version {d['copy_of']}" if "copy_of" in d else "the earlier version"
        return f"rolled back to {back} (active again as {version})"
    if e.action == "ack":
        since = f" standing since {d['since']}" if d.get("since") else ""
        return f"acknowledged the {d.get('status', '?')} advice{since}"
    if e.action == "rename":
        return f"renamed from '{d.get('from', '?')}' to '{d.get('to', '?')}'"
    if e.action == "delete":
        return (f"deleted with its {_counted(d, 'observations', 'observation')}, "
                f"{_counted(d, 'versions', 'version')} and "
                f"{_counted(d, 'day_checks', 'day check')}")
    if e.action == "correct":
        days = d.get("days") or []
        span = (f" on {days[0]}" if len(days) == 1 else
                f" on {len(days)} days, {days[0]} to {days[-1]}" if days else "")
        return (f"corrected {d.get('replaced', '?')} row(s){span} from {d.get('source', '?')} "
                f"(batch {d.get('batch', '?')}; the replaced values are kept)")
    if e.action == "prune":
        first = d.get("first")
        span = f"{first} to {d.get('through', '?')}" if first else f"through {d.get('through')}"
        replaced = (f" and {d['replaced_rows']} replaced value(s)" if d.get("replaced_rows")
                    else "")
        why = (f"retention keeps {d['keep_rows_days']} days" if d.get("keep_rows_days")
               else f"before {d.get('before', '?')}")
        return (f"pruned {d.get('rows', '?')} raw row(s){replaced} on {d.get('days', '?')} "
                f"day(s), {span} ({why}; day statistics and checks are kept)")
    if e.action == "failure":
        return f"nightly {d.get('stage', 'work')} failed: {d.get('error', '?')}"
    return e.action


def _counted(details: dict[str, Any], key: str, noun: str) -> str:
    value = details.get(key)
    return counted(value, noun) if isinstance(value, int) else f"? {noun}s"


def _line(e: LogLine, zone: ZoneInfo) -> str:
    at = local_time(e.at, zone)
    assert at is not None
    parts = [f"{at:%Y-%m-%d %H:%M}", e.model or "(no model)", f"{e.actor}:", what_was_done(e)]
    if e.effective_day is not None and e.action in ("promote", "rollback", "ack", "fit"):
        parts.append(f"from {e.effective_day}")
    text = " ".join(parts)
    return f"{text} (\"{e.reason}\")" if e.reason else text

