"""What people did to a model, as marks on the time charts: promotions, rollbacks,
acknowledgements and corrected rows, each on the day it took effect (from the audit log).

A promotion, rollback or acknowledgement takes effect on the model's next unchecked day, so the
latest one often falls on the day after the last checked day: a chart of days through
``last`` keeps marks through ``last + 1`` for that reason.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import date, timedelta

from sqlalchemy import Connection

from monitor.interface.audit_view import what_was_done
from monitor.store import audit
from monitor.store.audit import AuditEntry, LogLine

MARKED = ("promote", "rollback", "ack", "correct")  # audit actions drawn on time charts
NOUNS = {"promote": "promotion", "rollback": "rollback", "ack": "acknowledgement",
         "correct": "corrected rows"}
PLURALS = {"promote": "promotions", "rollback": "rollbacks", "ack": "acknowledgements",
           "correct": "corrected rows"}


@dataclass(frozen=True)
class Mark:
    """One action on a time chart."""

    day: date  # the day it took effect (a correction: the earliest day whose rows changed)
    action: str  # one of MARKED
    text: str  # "promoted version 2 in place of version 1", as ``fitwatch audit`` says it
    reason: str | None = None  # as given with the action (``--reason``)

    @property
    def noun(self) -> str:
        return NOUNS[self.action]


def _text(e: AuditEntry) -> str:
    """The entry in the words of ``fitwatch audit``."""
    number = (e.details or {}).get("version")  # promotions and rollbacks record it
    return what_was_done(LogLine(e.id, e.at, None, e.action, e.actor, e.reason,
                                 number if isinstance(number, int) else None, e.effective_day,
                                 e.details or {}))


def marks_from(entries: Iterable[AuditEntry], first: date, last: date) -> tuple[Mark, ...]:
    """The marks of ``entries`` that took effect from ``first`` through ``last + 1 day``,
    oldest first."""
    out = [Mark(e.effective_day, e.action, _text(e), e.reason) for e in entries
           if e.action in MARKED and e.effective_day is not None
           and first <= e.effective_day <= last + timedelta(days=1)]
    return tuple(sorted(out, key=lambda m: m.day))


def load_marks(conn: Connection, model_id: int, first: date, last: date) -> tuple[Mark, ...]:
    """The marks of a model's time charts of the days ``first`` through ``last``."""
    return marks_from(audit.entries(conn, model_id, MARKED, from_day=first), first, last)
