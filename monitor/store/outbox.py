"""The outbox: alert messages stored before they are sent, and what became of each.

A row is written once per dedupe key (recipient, night and kind) and then only moves forward:
``pending`` → ``sent`` (with ``sent_at``), or ``pending`` with one more attempt and a later
``next_attempt_at``, or finally ``failed`` (a permanent refusal, or the retry horizon passed).
A failed row is never dropped: it shows in ``status`` and the next digest until
:func:`retry_failed` sends it back to ``pending`` with a fresh horizon. Every function here is
one small statement; the caller chooses the transaction.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import Connection, func, select, update

from monitor.store.schema import outbox
from monitor.store.upsert import insert_for

PENDING, SENT, FAILED = "pending", "sent", "failed"


@dataclass(frozen=True)
class NewMessage:
    """A composed message for one recipient, ready to queue."""

    dedupe_key: str
    recipient: str
    subject: str
    body_text: str
    body_html: str | None
    chart_png: bytes | None


@dataclass(frozen=True)
class OutboxRow:
    id: int
    dedupe_key: str
    recipient: str
    subject: str
    body_text: str
    body_html: str | None
    chart_png: bytes | None
    status: str
    attempts: int
    last_error: str | None
    created_at: datetime
    next_attempt_at: datetime
    sent_at: datetime | None
    retry_since: datetime | None

    @property
    def horizon_start(self) -> datetime:
        """When the retry horizon started: queued, or last sent back by a retry request."""
        return self.retry_since or self.created_at


@dataclass(frozen=True)
class Undelivered:
    """Messages not (yet) delivered: given up on, or waiting for another attempt."""

    failed: int
    retrying: int  # pending after at least one failed attempt
    oldest: datetime | None  # when the oldest of them was queued
    last_error: str | None  # the most recent error among them

    def __bool__(self) -> bool:
        return bool(self.failed or self.retrying)

    def as_dict(self) -> dict[str, object]:
        return {"failed": self.failed, "retrying": self.retrying, "oldest": self.oldest,
                "last_error": self.last_error, "sentence": self.sentence()}

    def sentence(self) -> str:
        parts = []
        if self.failed:
            parts.append(f"{self.failed} alert message(s) could not be delivered and were "
                         "given up ('fitwatch alerts --retry-failed' sends them again)")
        if self.retrying:
            parts.append(f"{self.retrying} alert message(s) are waiting to be retried")
        since = f" since {self.oldest:%Y-%m-%d %H:%M} UTC" if self.oldest else ""
        error = f"; last error: {self.last_error}" if self.last_error else ""
        return "ALERTS UNDELIVERED" + since + ": " + "; ".join(parts) + error


def _row(r: object) -> OutboxRow:
    m = r._mapping  # type: ignore[attr-defined]
    return OutboxRow(**{name: m[name] for name in OutboxRow.__dataclass_fields__})


def existing_keys(conn: Connection, keys: list[str]) -> set[str]:
    """Those of ``keys`` that are already in the outbox (in any status)."""
    if not keys:
        return set()
    rows = conn.execute(select(outbox.c.dedupe_key).where(outbox.c.dedupe_key.in_(keys)))
    return {r[0] for r in rows}


def queue_message(conn: Connection, message: NewMessage, now: datetime) -> bool:
    """Store ``message`` as pending unless its dedupe key is there already; True if stored.

    ``INSERT ... ON CONFLICT DO NOTHING`` on the unique key, so two runs of the same night racing
    each other on PostgreSQL store the message once instead of one of them failing.
    """
    statement = insert_for(conn, outbox).values(
        dedupe_key=message.dedupe_key, recipient=message.recipient, subject=message.subject,
        body_text=message.body_text, body_html=message.body_html, chart_png=message.chart_png,
        status=PENDING, attempts=0, last_error=None, created_at=now, next_attempt_at=now,
        sent_at=None, retry_since=now,
    ).on_conflict_do_nothing(index_elements=[outbox.c.dedupe_key])
    return bool(conn.execute(statement).rowcount)


def due_ids(conn: Connection, now: datetime) -> list[int]:
    """Pending rows whose next attempt is due, oldest first."""
    rows = conn.execute(select(outbox.c.id)
                        .where(outbox.c.status == PENDING, outbox.c.next_attempt_at <= now)
                        .order_by(outbox.c.next_attempt_at, outbox.c.id))
    return [int(r[0]) for r in rows]


def claim(conn: Connection, row_id: int, now: datetime, until: datetime) -> OutboxRow | None:
    """Take a due pending row for one delivery attempt, or None if another sender has it.

    The claim moves ``next_attempt_at`` to ``until``; a sender that dies before recording the
    outcome thereby leaves the row to be tried again once ``until`` has passed.
    """
    result = conn.execute(update(outbox)
                          .where(outbox.c.id == row_id, outbox.c.status == PENDING,
                                 outbox.c.next_attempt_at <= now)
                          .values(next_attempt_at=until))
    if not result.rowcount:
        return None
    return get(conn, row_id)


def get(conn: Connection, row_id: int) -> OutboxRow:
    return _row(conn.execute(select(outbox).where(outbox.c.id == row_id)).one())


def mark_sent(conn: Connection, row_id: int, at: datetime) -> None:
    conn.execute(update(outbox).where(outbox.c.id == row_id)
                 .values(status=SENT, sent_at=at, attempts=outbox.c.attempts + 1))


def mark_attempt_failed(conn: Connection, row_id: int, *, error: str,
                        next_attempt_at: datetime, give_up: bool) -> None:
    conn.execute(update(outbox).where(outbox.c.id == row_id)
                 .values(status=FAILED if give_up else PENDING, last_error=error,
                         attempts=outbox.c.attempts + 1, next_attempt_at=next_attempt_at))


def rows(conn: Connection, status: str | None = None) -> list[OutboxRow]:
    """Every outbox row (or those in ``status``), oldest first."""
    query = select(outbox).order_by(outbox.c.id)
    if status is not None:
        query = query.where(outbox.c.status == status)
    return [_row(r) for r in conn.execute(query)]


def undelivered(conn: Connection) -> Undelivered:
    """What is given up on or still waiting after a failed attempt (sent rows do not count)."""
    trouble = (outbox.c.status == FAILED) | ((outbox.c.status == PENDING)
                                             & (outbox.c.attempts > 0))
    by_status = select(outbox.c.status, func.count()).where(trouble).group_by(outbox.c.status)
    counts: dict[str, int] = {str(k): int(v) for k, v in conn.execute(by_status).all()}
    oldest = conn.execute(select(func.min(outbox.c.created_at)).where(trouble)).scalar()
    last = conn.execute(select(outbox.c.last_error).where(trouble)
                        .order_by(outbox.c.next_attempt_at.desc(), outbox.c.id.desc())
                        .limit(1)).scalar()
    return Undelivered(counts.get(FAILED, 0), counts.get(PENDING, 0), oldest, last)


def retry_failed(conn: Connection, now: datetime) -> int:
    """Send every failed row back to ``pending``, due now, with a fresh retry horizon."""
    result = conn.execute(update(outbox).where(outbox.c.status == FAILED)
                          .values(status=PENDING, next_attempt_at=now, retry_since=now))
    return int(result.rowcount or 0)
