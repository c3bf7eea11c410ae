"""One nightly run: sweep the inbox, check every unchecked day through yesterday, send alerts,
and refresh the team page when ``[report] dir`` is set; prune raw rows past the retention
horizon (``storage.keep_rows_days``).

The daemon calls :func:`run_night` on its schedule (and once at start, to catch up); ``fitwatch
daemon --once`` calls it from cron. Everything it needs to know comes from the database's own
record, so a machine that was off for a week catches up the whole week. Models are checked one
at a time: a stop request (SIGTERM) is honoured between models, and one model's failure is
logged with its traceback, written to the audit log and does not stop the others. Alerts go out
for every stored check not yet queued, night by night, oldest first, so news in the middle of a
catch-up is not lost, nor the news of a run that died after checking and before queueing.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass, replace
from datetime import date, datetime
from pathlib import Path
from typing import Any

from sqlalchemy import Engine

from monitor.alerts.mailer import Mailer
from monitor.alerts.service import AlertRun, queue_pending, send_due
from monitor.config import Settings
from monitor.domain.days import yesterday
from monitor.errors import ExitCode, Failure, describe
from monitor.ingest.inbox import Sweep, sweep_inbox
from monitor.ingest.service import ingest_configured_source
from monitor.ingest.summary import IngestSummary
from monitor.lifecycle.pruning import NIGHTLY_BATCH_DAYS, ModelPrune, prune_model
from monitor.monitoring.check import CheckOutcome, ModelCheck, run_checks
from monitor.store import audit
from monitor.store.engine import write_transaction
from monitor.store.models import find_model, list_models

log = logging.getLogger(__name__)

OK, PARTIAL, STOPPED = "ok", "partial", "stopped"


@dataclass(frozen=True)
class NightRun:
    """What one run did."""

    started_at: datetime
    through: date
    sweep: Sweep
    sources: tuple[IngestSummary, ...]  # rows pulled from models' SQL sources
    checks: CheckOutcome
    nights: tuple[date, ...]  # nights whose alerts this run queued (checked by it or before)
    alerts: AlertRun | None  # None: the alerts failed (see problems)
    stopped: bool  # a stop request ended the run early
    problems: tuple[str, ...] = ()  # inbox, SQL source or prune failures (checks still ran)
    pruned: tuple[ModelPrune, ...] = ()  # rows retention removed after the checks

    @property
    def failures(self) -> list[ModelCheck]:
        return [r for r in self.checks.results if r.failure]

    @property
    def status(self) -> str:
        gave_up = self.alerts is not None and self.alerts.failed > 0
        return (STOPPED if self.stopped
                else PARTIAL if self.failures or self.problems or gave_up else OK)

    def exit_code(self) -> int:
        """For ``daemon --once`` (cron): 0 when all went through (or a stop request ended the
        run); else the worst failure's code, 2 for a bug in a model's check, else 1."""
        if self.status != PARTIAL:
            return int(ExitCode.OK)
        codes = [int(r.failure.exit_code) for r in self.failures if r.failure]
        if self.problems or (self.alerts is not None and self.alerts.failed):
            codes.append(int(ExitCode.INPUT))
        return max(codes)

    def as_dict(self) -> dict[str, Any]:
        return {"started_at": self.started_at, "through": self.through, "status": self.status,
                "inbox": [f.as_dict() for f in self.sweep.files],
                "sources": [s.as_dict() for s in self.sources],
                "checked": [{"model": r.model, "first_day": r.first_day,
                             "last_day": r.last_day, "status": r.current.status
                             if r.current else None, "error": r.error}
                            for r in self.checks.results],
                "nights": list(self.nights),
                "alerts": self.alerts.as_dict() if self.alerts else None,
                "problems": list(self.problems),
                "pruned": [p.as_dict() for p in self.pruned]}

    def sentence(self) -> str:
        days = len(self.checks.checks)
        parts = [self.sweep.sentence()]
        if self.sources:
            parts.append(f"{sum(s.accepted for s in self.sources)} row(s) from SQL sources")
        parts.append(f"{days} model-day(s) checked through {self.through}")
        if self.failures:
            parts.append("failed: " + "; ".join(f"{r.model} ({r.error})"
                                                for r in self.failures))
        parts.extend(self.problems)
        parts.extend(p.sentence() for p in self.pruned)
        if self.alerts is not None:
            parts.append(f"{self.alerts.queued} alert message(s) queued, "
                         f"{self.alerts.sent} sent"
                         + (f", {self.alerts.failed} given up (see 'fitwatch status')"
                            if self.alerts.failed else ""))
        if self.stopped:
            parts.append("stopped early on request")
        return "; ".join(parts)


def run_night(settings: Settings, engine: Engine, *, now: datetime,
              mailer: Mailer | None = None, actor: str = "daemon",
              should_stop: Callable[[], bool] = lambda: False) -> NightRun:
    """Sweep, check every model through yesterday, then alert per night not yet queued."""
    through = yesterday(now, settings.timezone)
    problems: list[str] = []  # failures outside a model's check (inbox, SQL sources)
    try:
        sweep = sweep_inbox(engine, settings, now, should_stop=should_stop)
    except Exception as exc:  # e.g. the database is locked: the files wait for the next run
        log.exception("sweeping the inbox failed")
        problems.append(f"inbox: {describe(exc)}")
        _record_failure(engine, None, describe(exc), now, actor, stage="inbox")
        sweep = Sweep()
    results: list[ModelCheck] = []
    stopped = False
    with engine.connect() as conn:
        names = [m.name for m in list_models(conn)]
    pulled: list[IngestSummary] = []
    for name in names:
        if should_stop():
            stopped = True
            break
        pulled.extend(_pull_source(settings, engine, name, now, actor, problems))
        outcome = _check_one(settings, engine, name, through, now, actor)
        results.extend(outcome.results)
    done = _alert(settings, engine, now, mailer, actor, problems)
    alerts, nights = done if done is not None else (None, ())
    pruned = () if stopped else _prune(settings, engine, now, actor, problems)
    if settings.report.dir and not stopped:
        _team_page(settings, engine, now, actor, problems)
    return NightRun(now, through, sweep, tuple(pulled), CheckOutcome(tuple(results)),
                    nights, alerts, stopped, tuple(problems), pruned)


def _prune(settings: Settings, engine: Engine, now: datetime, actor: str,
           problems: list[str]) -> tuple[ModelPrune, ...]:
    """Retention after the checks (``storage.keep_rows_days``), once a week's worth of days is
    past the horizon; a failure is a problem of the run, never a failed check."""
    keep = settings.storage.keep_rows_days
    if not keep:
        return ()
    with engine.connect() as conn:
        models = list_models(conn)
    done = []
    for model in models:
        try:
            result = prune_model(engine, model.id, model.name, keep_days=keep, now=now,
                                 actor=actor, at_least_days=NIGHTLY_BATCH_DAYS)
        except Exception as exc:  # the rows stay; the next run tries again
            log.exception("pruning the rows of %s failed", model.name)
            problems.append(f"{model.name} prune: {describe(exc)}")
            _record_failure(engine, model.name, describe(exc), now, actor, stage="prune")
            continue
        if result.rows or result.replaced_rows:
            done.append(result)
    return tuple(done)


def _alert(settings: Settings, engine: Engine, now: datetime, mailer: Mailer | None,
           actor: str, problems: list[str]) -> tuple[AlertRun, tuple[date, ...]] | None:
    """Queue every checked night not yet queued, oldest first, then send everything due.

    What to queue comes from the stored checks (``queued_nights``), so the nights of a run that
    died after its checks committed are queued by the next one; rechecked old days (late rows)
    keep their mark and are not reported twice. Queueing comes first and apart from sending, so
    a transport that fails (no SMTP password, a folder that cannot be written) loses no night:
    its messages wait in the outbox and go out on a later run, once each. Failures are
    recorded and do not fail the checks.
    """
    try:
        queued = queue_pending(settings, now=now, engine=engine)
        sent = send_due(settings, now=now, engine=engine, mailer=mailer)
    except Exception as exc:
        log.exception("the alerts could not all go out")
        problems.append(f"alerts: {describe(exc)}")
        _record_failure(engine, None, describe(exc), now, actor, stage="alerts")
        return None
    night = queued.nights[-1] if queued.nights else None
    return replace(sent, night=night, queued=queued.queued), queued.nights


def _team_page(settings: Settings, engine: Engine, now: datetime, actor: str,
               problems: list[str]) -> None:
    """Refresh the team page (``[report] dir``) from what the run stored. A failure is logged,
    recorded and reported with the run; the checks and alerts are done and stay done."""
    from monitor.report.team import write_team_report  # matplotlib and Jinja2: only here

    try:
        team = write_team_report(settings, Path(settings.report.dir), engine=engine, now=now,
                                 days=settings.report.days)
    except Exception as exc:  # a full disk, a folder not writable: tomorrow's run tries again
        log.exception("writing the team page into %s failed", settings.report.dir)
        problems.append(f"report: {describe(exc)}")
        _record_failure(engine, None, describe(exc), now, actor, stage="report")
        return
    for problem in team.problems:
        log.error("the team page could not show %s", problem)
        problems.append(f"report: {problem}")


def _pull_source(settings: Settings, engine: Engine, name: str, now: datetime, actor: str,
                 problems: list[str]) -> list[IngestSummary]:
    """Rows from the model's SQL source, if it has one; a failure is recorded, checks go on."""
    if settings.for_model(name).source is None:
        return []
    try:
        return [ingest_configured_source(settings, name, now=now, engine=engine)]
    except Exception as exc:  # the source database may be down: check what is stored
        log.exception("reading the SQL source of %s failed", name)
        problems.append(f"{name} source: {describe(exc)}")
        _record_failure(engine, name, describe(exc), now, actor, stage="source")
        return []


def _check_one(settings: Settings, engine: Engine, name: str, through: date, now: datetime,
               actor: str) -> CheckOutcome:
    try:
        outcome = run_checks(settings, [name], through=through, now=now, engine=engine)
    except Exception as exc:  # one model must not stop the night; KeyboardInterrupt passes
        log.exception("the nightly check of %s failed", name)
        outcome = CheckOutcome((ModelCheck(name, (), None, None, None,
                                           failure=Failure.of(exc)),))
    for result in outcome.results:
        if result.failure:
            _record_failure(engine, name, result.failure.message, now, actor)
    return outcome


def _record_failure(engine: Engine, name: str | None, error: str, now: datetime, actor: str,
                    stage: str = "check") -> None:
    try:
        with write_transaction(engine) as conn:
            model = find_model(conn, name) if name else None
            audit.record(conn, action="failure", actor=actor, at=now,
                         model_id=model.id if model else None,
                         details={"stage": stage, "error": error[:2000]})
    except Exception:  # the database itself may be what failed; the log has it already
        log.exception("could not record the failure of %s", name)
