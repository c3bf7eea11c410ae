"""The night's alerts: decide, compose and queue them in the outbox, then send what is due.

Delivery is exactly once in the normal case:

- :func:`queue_night` writes all of a night's messages in one transaction, one row per
  dedupe key (recipient + night + kind); running the night again queues nothing new.
- :func:`send_due` takes one due row at a time: a small transaction *claims* it (moves its
  ``next_attempt_at`` ahead by :data:`CLAIM_SECONDS`, so a second sender leaves it alone), the
  mailer hands it on, and the very next statement is a small transaction marking it ``sent``.

The one unavoidable window: the SMTP server has accepted the message (its reply to the end of
DATA) but the process dies before the ``sent`` commit. The row is then still ``pending`` and
is sent again after the claim expires, so the recipient gets it twice. The window is kept to
the time of one local commit: nothing else (no logging, no QUIT, no other row) happens between
the server's acceptance and that commit, and every copy carries the same Message-ID (derived
from the dedupe key), by which mail systems and readers can recognise the repeat. The ``.eml``
folder has no such window: the file name comes from the dedupe key, so a repeat overwrites.

Transport and sender are the global ``[alerts]`` ones (``smtp``, ``eml_dir``, ``sender``): one
digest can cover models with different ``[models.NAME.alerts]``, whose ``to``, ``on`` and
``remind_every_days`` decide who hears about which model and when. A run that catches up
several nights should call :func:`send_night_alerts` once per night, oldest first.
"""

from __future__ import annotations

import hashlib
import logging
from collections.abc import Sequence
from dataclasses import dataclass, fields
from datetime import date, datetime, timedelta
from typing import Any

from sqlalchemy import Connection, Engine

from monitor.alerts.compose import (
    KIND_NIGHT,
    ModelContext,
    build_message,
    compose,
    dedupe_key,
)
from monitor.alerts.mailer import DeliveryError, Mailer, mailer_for
from monitor.alerts.news import (
    Digest,
    ModelNews,
    digests,
    model_news,
)
from monitor.config import Settings
from monitor.domain.data_health import DataHealth
from monitor.domain.days import yesterday
from monitor.domain.model import ModelRecord
from monitor.domain.version import Version
from monitor.errors import StateError
from monitor.monitoring.data_health import Prefetched, model_data_health, prefetch
from monitor.report.charts import ChartPanel, digest_chart_png
from monitor.report.marks import load_marks
from monitor.store import audit, queued_nights
from monitor.store import outbox as box
from monitor.store.access import database
from monitor.store.checks import (
    checks_on,
    last_checks_before,
    load_checks,
    models_checked_on,
)
from monitor.store.engine import write_transaction
from monitor.store.models import list_models
from monitor.store.versions import candidates_by_model, versions_by_id

log = logging.getLogger(__name__)

# RFC 5321 §4.5.4.1: "the give-up time generally needs to be at least 4-5 days"; a row keeps
# being retried for this long after it was queued (or sent back by 'alerts --retry-failed')
RETRY_FOR = timedelta(days=5)
FIRST_BACKOFF = timedelta(minutes=5)
MAX_BACKOFF = timedelta(hours=6)
CLAIM_SECONDS = 600  # a claimed row another sender may not touch (covers one SMTP exchange)
CHART_DAYS = 60  # days of checks the alert chart shows, ending on the night
CHART_MODELS = 4  # models a digest's chart shows (the most pressing); the rest: see the report


def backoff(attempts: int) -> timedelta:
    """Wait after the ``attempts``-th failure: 5 min doubling, at most 6 h."""
    return min(FIRST_BACKOFF * 2 ** max(attempts - 1, 0), MAX_BACKOFF)


@dataclass(frozen=True)
class AlertRun:
    """What one alert run did."""

    night: date | None
    queued: int  # new outbox rows for the night
    sent: int  # rows handed on during this run
    retried: int  # attempts that failed this run and will be tried again later
    failed: int  # rows given up on during this run (status 'failed')
    pending: int  # rows still waiting after this run (due later or not reached)
    transport: str  # where messages went: an SMTP host or a folder

    def as_dict(self) -> dict[str, Any]:
        return {f.name: getattr(self, f.name) for f in fields(self)}

    def sentence(self) -> str:
        night = f"night of {self.night.isoformat()}: " if self.night else ""
        parts = [f"{self.queued} message(s) queued", f"{self.sent} sent via {self.transport}"]
        if self.retried:
            parts.append(f"{self.retried} to retry later")
        if self.failed:
            parts.append(f"{self.failed} given up")
        if self.pending:
            parts.append(f"{self.pending} still pending")
        return night + ", ".join(parts)


@dataclass(frozen=True)
class _Delivery:
    sent: int
    retried: int
    failed: int
    pending: int


# deciding and queueing ------------------------------------------------------------------------
def _context(settings: Settings, model: ModelRecord, scoring: Version | None,
             candidates: Sequence[int]) -> ModelContext:
    ms = settings.for_model(model.name)
    return ModelContext(
        model=model.name, response=model.response, predictors=model.predictors,
        words=ms.words, level=scoring.level if scoring else ms.check.level,
        version=scoring.number if scoring else None,
        plan_slopes=tuple(float(b) for b in scoring.coefficients[1:]) if scoring else (),
        candidate=max(candidates) if candidates else None,
        coverage_window_days=ms.check.coverage_window_days,
        version_from=scoring.active_from if scoring else None)


def _data(settings: Settings, conn: Connection, model: ModelRecord, scoring: Version | None,
          night: date, now: datetime, reads: Prefetched) -> tuple[DataHealth, DataHealth | None]:
    """The model's data findings as of the night (at ``now``, read first for every model:
    ``reads``) and, when any stand (only then are they compared, :func:`data_is_news`), as of
    its previous digest."""
    ms = settings.for_model(model.name)
    data = model_data_health(conn, model, ms.check, scoring, through=night, now=now,
                             zone=settings.timezone, prefetched=reads)
    if not data.stands:
        return data, None
    since = queued_nights.last_queued_at(conn, model.id, night)
    before = None if since is None else model_data_health(
        conn, model, ms.check, scoring, through=night - timedelta(days=1), now=since,
        zone=settings.timezone)
    return data, before


def night_news(settings: Settings, conn: Connection, night: date, *, now: datetime,
               only: set[int] | None = None, unseen_since: date | None = None
               ) -> tuple[list[ModelNews], dict[str, ModelContext]]:
    """Every model's news for ``night`` (or only that of the models ``only``), queued at
    ``now``, and what composing it needs (``unseen_since``: see :func:`model_news`).

    The night's checks, the checks before them, the versions that scored them and the
    candidates are read for all the models at once (a night of thousands of models is wrapped
    up by one worker); the data findings and the actions, model by model.
    """
    models = [m for m in list_models(conn) if only is None or m.id in only]
    names = {m.id: m.name for m in models}
    tonight = checks_on(conn, night, names)
    earlier = last_checks_before(conn, night, {i: names[i] for i in tonight})
    scoring = versions_by_id(conn, (c.version_id for c in tonight.values()))
    candidates = candidates_by_model(conn, tonight)
    taking_effect = audit.actions_on(conn, tonight, night)
    reads = prefetch(conn, tonight, through=night, now=now)
    news, contexts = [], {}
    for model in models:
        check = tonight.get(model.id)
        if check is None:
            continue
        version = scoring.get(check.version_id)  # None once it is gone with its model
        data, before = _data(settings, conn, model, version, night, now, reads)
        item = model_news(model.name, night, check, earlier.get(model.id),
                          taking_effect.get(model.id, []),
                          settings.for_model(model.name).alerts,
                          data=data, data_before=before, unseen_since=unseen_since)
        if item is None:
            continue
        news.append(item)
        contexts[model.name] = _context(settings, model, version,
                                        candidates.get(model.id, []))
    return news, contexts


def _chart_models(digest: Digest) -> tuple[str, ...]:
    """The models the digest's chart shows: the most pressing ones (items are sorted so)."""
    return tuple(item.model for item in digest.items[:CHART_MODELS])


def _panel(conn: Connection, news: ModelNews, level: float) -> ChartPanel:
    first = news.night - timedelta(days=CHART_DAYS - 1)
    checks = load_checks(conn, news.check.model_id, first, news.night, model=news.model)
    marks = load_marks(conn, news.check.model_id, first, news.night)
    return ChartPanel(news.model, checks, level, marks)


def _late_key(recipient: str, night: date, models: Sequence[str]) -> str:
    """The key of a second digest for a night whose first went out before these models'
    checks of it were stored (e.g. a model that failed that night and was checked later)."""
    tag = hashlib.sha256("\n".join(sorted(models)).encode()).hexdigest()[:12]
    return dedupe_key(recipient, night, f"{KIND_NIGHT}+{tag}")


def queue_night(settings: Settings, night: date, *, now: datetime,
                engine: Engine | None = None, note: str | None = None,
                unseen_since: date | None = None) -> int:
    """Queue ``night``'s digests in the outbox (one transaction); returns how many are new.

    Only the models whose check of ``night`` is not yet queued (``queued_nights``) are news;
    the same transaction records them as queued, so a night is queued once whoever checked it
    and whatever became of that process.
    """
    with database(settings, engine) as db:
        with db.connect() as conn:
            waiting = queued_nights.pending_models(conn, night)
            if not waiting:
                return 0
            news, contexts = night_news(settings, conn, night, now=now, only=waiting,
                                        unseen_since=unseen_since)
            wanted: dict[str, Digest] = {}
            for d in digests(news):
                wanted[dedupe_key(d.recipient, night, KIND_NIGHT)] = d
            known = box.existing_keys(conn, list(wanted))
            for key in [k for k in wanted if k in known]:
                digest = wanted.pop(key)
                wanted[_late_key(digest.recipient, night,
                                 [i.model for i in digest.items])] = digest
            known = box.existing_keys(conn, list(wanted))
            trouble = box.undelivered(conn)
            notice = ". ".join(n for n in (trouble.sentence() if trouble else None, note) if n
                               ) or None
            charts: dict[tuple[str, ...], bytes] = {}
            panels: dict[str, ChartPanel] = {}
            messages = []
            for key, digest in wanted.items():
                if key in known:
                    continue
                shown = _chart_models(digest)
                if shown not in charts:
                    for item in digest.items[:CHART_MODELS]:
                        if item.model not in panels:
                            panels[item.model] = _panel(conn, item, contexts[item.model].level)
                    charts[shown] = digest_chart_png([panels[m] for m in shown])
                composed = compose(digest, contexts, key=key, chart_models=shown,
                                   notice=notice)
                messages.append(box.NewMessage(key, digest.recipient, composed.subject,
                                               composed.text, composed.html, charts[shown]))
        with write_transaction(db) as conn:
            queued = sum(box.queue_message(conn, m, now) for m in messages)
            queued_nights.mark_queued(conn, waiting, night, now)
    if queued:
        log.info("queued %d alert message(s) for the night of %s", queued, night)
    return queued


@dataclass(frozen=True)
class QueueRun:
    """What :func:`queue_pending` did: the nights it queued, oldest first, new messages, and
    the nights past the catch-up horizon recorded as seen without a message."""

    nights: tuple[date, ...]
    queued: int
    skipped: tuple[date, ...] = ()


def catch_up_start(settings: Settings, now: datetime) -> date:
    """The oldest night a run at ``now`` still mails (``[alerts] catch_up_nights``)."""
    return yesterday(now, settings.timezone) - timedelta(
        days=settings.alerts.catch_up_nights - 1)


def _skipped_note(skipped: Sequence[date], start: date) -> str:
    first, last = skipped[0], skipped[-1]
    span = (f"the night of {first}" if first == last
            else f"{len(skipped)} nights ({first} to {last})")
    return (f"The checks of {span} were stored without a message: a run that catches up mails "
            f"the nights from {start} on ([alerts] catch_up_nights); 'fitwatch days --csv' "
            "lists every checked day")


def queue_pending(settings: Settings, *, now: datetime, engine: Engine | None = None,
                  through: date | None = None) -> QueueRun:
    """Queue every stored check not yet queued, night by night, oldest first.

    What to queue comes from the database (checked and not yet in ``queued_nights``), not from
    what one process checked: a run killed after its checks committed and before this step
    leaves the nights pending, and the next run (or ``alerts``) queues them, once each.

    Nights before the catch-up horizon (:func:`catch_up_start`) get no message of their own:
    a machine off for a month, or a year of history checked by hand before the first nightly
    run, would otherwise send the planning lead a digest for every one of those nights. They
    are recorded as seen in the same way, and the first message of the run says so.
    """
    with database(settings, engine) as db:
        with db.connect() as conn:
            nights = queued_nights.pending_nights(conn, through)
        start = catch_up_start(settings, now)
        skipped = tuple(n for n in nights if n < start)
        if skipped:
            with write_transaction(db) as conn:
                queued_nights.mark_older_queued(conn, start, now)
            log.info("%d night(s) before %s were checked and not yet mailed: recorded without "
                     "a message (catch_up_nights)", len(skipped), start)
        note = _skipped_note(skipped, start) if skipped else None
        queued = 0
        recent = tuple(n for n in nights if n >= start)
        for i, night in enumerate(recent):
            new = queue_night(settings, night, now=now, engine=db, note=note,
                              unseen_since=skipped[0] if skipped and i == 0 else None)
            queued += new
            if new:
                note = None  # said once, in the first message of the run
    return QueueRun(recent, queued, skipped)


# sending --------------------------------------------------------------------------------------
def _message(row: box.OutboxRow, sender: str) -> Any:
    return build_message(key=row.dedupe_key, sender=sender, recipient=row.recipient,
                         subject_line=row.subject, text=row.body_text, html=row.body_html,
                         chart_png=row.chart_png, created_at=row.created_at)


def _deliver(db: Engine, mailer: Mailer, sender: str, now: datetime) -> _Delivery:
    sent = retried = failed = 0
    with db.connect() as conn:
        due = box.due_ids(conn, now)
    for row_id in due:
        with write_transaction(db) as conn:
            row = box.claim(conn, row_id, now, now + timedelta(seconds=CLAIM_SECONDS))
        if row is None:  # another sender took it meanwhile
            continue
        try:
            mailer.send(_message(row, sender), key=row.dedupe_key)
        except DeliveryError as exc:
            attempts = row.attempts + 1
            give_up = exc.permanent or now - row.horizon_start >= RETRY_FOR
            with write_transaction(db) as conn:
                box.mark_attempt_failed(conn, row.id, error=str(exc),
                                        next_attempt_at=now + backoff(attempts),
                                        give_up=give_up)
            if give_up:
                failed += 1
                log.error("gave up on alert %s to %s after %d attempt(s): %s",
                          row.dedupe_key, row.recipient, attempts, exc)
            else:
                retried += 1
                log.warning("alert %s to %s not delivered (attempt %d), next try after %s, "
                            "given up after %s: %s", row.dedupe_key, row.recipient, attempts,
                            (now + backoff(attempts)).isoformat(),
                            (row.horizon_start + RETRY_FOR).isoformat(), exc)
            if exc.unreachable:  # the others would wait out the same timeout: next run
                log.warning("the mail server cannot be reached; the other due alerts wait "
                            "for the next run")
                break
            continue
        with write_transaction(db) as conn:  # at once: this commit closes the window
            box.mark_sent(conn, row.id, now)
        sent += 1
        log.info("alert %s sent to %s via %s", row.dedupe_key, row.recipient, mailer.where())
    with db.connect() as conn:
        pending = len(box.rows(conn, box.PENDING))
    return _Delivery(sent, retried, failed, pending)


def send_due(settings: Settings, *, now: datetime, engine: Engine | None = None,
             mailer: Mailer | None = None) -> AlertRun:
    """Send every pending outbox row whose next attempt is due (each in its own transactions)."""
    mailer = mailer if mailer is not None else mailer_for(settings.alerts)
    try:
        with database(settings, engine) as db:
            done = _deliver(db, mailer, settings.alerts.sender, now)
    finally:
        mailer.close()
    return AlertRun(None, 0, done.sent, done.retried, done.failed, done.pending, mailer.where())


def send_night_alerts(settings: Settings, night: date, *, now: datetime,
                      engine: Engine | None = None, mailer: Mailer | None = None,
                      require_checked: bool = False) -> AlertRun:
    """Queue ``night``'s messages, then send everything due (this night's and earlier retries).

    The one entry point for the daemon and the command line. ``night`` is the calendar day that
    was just checked, in the configured time zone; ``now`` is the instant of the run. A night
    no model has been checked for is a :class:`StateError` when ``require_checked`` (the
    command line: there is nothing to send yet, and saying nothing would look like "all quiet").
    """
    with database(settings, engine) as db:
        if require_checked:
            with db.connect() as conn:
                if not models_checked_on(conn, night):
                    raise StateError(f"no model has been checked for the night of {night}; "
                                     f"run 'fitwatch check --through {night}' first, then "
                                     "'fitwatch alerts --night' again")
        queued = queue_night(settings, night, now=now, engine=db)
        delivery = send_due(settings, now=now, engine=db, mailer=mailer)
    return AlertRun(night, queued, delivery.sent, delivery.retried, delivery.failed,
                    delivery.pending, delivery.transport)


def retry_failed(settings: Settings, *, now: datetime, engine: Engine | None = None) -> int:
    """Send every given-up outbox row back to the queue, due now, with a fresh retry horizon."""
    with database(settings, engine) as db, write_transaction(db) as conn:
        count = box.retry_failed(conn, now)
    log.info("%d failed alert message(s) sent back to the queue", count)
    return count


def undelivered(settings: Settings, *, engine: Engine | None = None) -> box.Undelivered:
    """Messages given up on or waiting for another attempt."""
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        return box.undelivered(conn)


def send_pending_alerts(settings: Settings, *, now: datetime, engine: Engine | None = None,
                        mailer: Mailer | None = None) -> AlertRun:
    """Queue every checked night not yet queued (oldest first), then send everything due."""
    with database(settings, engine) as db:
        queued = queue_pending(settings, now=now, engine=db)
        delivery = send_due(settings, now=now, engine=db, mailer=mailer)
    return AlertRun(queued.nights[-1] if queued.nights else None, queued.queued, delivery.sent,
                    delivery.retried, delivery.failed, delivery.pending, delivery.transport)


__all__ = [
    "CLAIM_SECONDS",
    "RETRY_FOR",
    "AlertRun",
    "QueueRun",
    "backoff",
    "night_news",
    "queue_night",
    "queue_pending",
    "retry_failed",
    "send_due",
    "send_night_alerts",
    "send_pending_alerts",
    "undelivered",
]
