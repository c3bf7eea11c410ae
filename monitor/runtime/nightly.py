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
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from datetime import UTC, date, datetime, timedelta
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
from monitor.runtime.holder import gone_from_this_host, holder_name
from monitor.store import audit, claims
from monitor.store.engine import write_transaction
from monitor.store.models import find_model, list_models

CLAIM_TTL = timedelta(minutes=5)  # a claim not renewed this long is taken over
CLAIM_POLL_SECONDS = 2.0  # how often a worker with nothing to take looks again
GONE_LOOK_SECONDS = 30.0  # how often a busy worker looks for siblings killed on this host

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
    wrapped: bool = True  # this run wrapped the round (alerts, pruning, team page)
    model_days: int | None = None  # days checked, when ``checks`` was slimmed (``slim``)

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

    @property
    def days(self) -> int:
        """Model-days checked."""
        return len(self.checks.checks) if self.model_days is None else self.model_days

    def slim(self) -> NightRun:
        """The run without its day checks (kept: each model's latest), small enough to send
        from a worker process to the daemon."""
        results = tuple(replace(r, checks=()) for r in self.checks.results)
        return replace(self, checks=CheckOutcome(results), model_days=self.days)

    @classmethod
    def combine(cls, sweep: Sweep, runs: Sequence[NightRun],
                problems: Sequence[str] = ()) -> NightRun:
        """One run from the shares of several workers (of one daemon, one night)."""
        first = runs[0]
        wrapper = next((r for r in runs if r.wrapped), None)
        return cls(first.started_at, first.through, sweep,
                   tuple(s for r in runs for s in r.sources),
                   CheckOutcome(tuple(m for r in runs for m in r.checks.results)),
                   wrapper.nights if wrapper else (), wrapper.alerts if wrapper else None,
                   any(r.stopped for r in runs),
                   tuple(problems) + tuple(p for r in runs for p in r.problems),
                   wrapper.pruned if wrapper else (), wrapped=wrapper is not None,
                   model_days=sum(r.days for r in runs))

    def sentence(self) -> str:
        days = self.days
        parts = [self.sweep.sentence()]
        if self.sources:
            parts.append(f"{sum(s.accepted for s in self.sources)} row(s) from SQL sources")
        parts.append(f"{days} model-day(s) checked through {self.through}")
        if self.failures:
            parts.append("failed: " + "; ".join(f"{r.model} ({r.error})"
                                                for r in self.failures))
        parts.extend(self.problems)
        parts.extend(p.sentence() for p in self.pruned)
        if not self.wrapped and not self.stopped:
            parts.append("the night's alerts go out from the worker that finishes it")
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
              should_stop: Callable[[], bool] = lambda: False,
              holder: str | None = None) -> NightRun:
    """Sweep the inbox, then work the night's round: check every model through yesterday
    (those no other worker holds), and wrap the round when it is done."""
    problems: list[str] = []
    sweep = sweep_once(settings, engine, now, actor, problems, should_stop)
    run = work_round(settings, engine, now=now, mailer=mailer, actor=actor,
                     should_stop=should_stop, holder=holder)
    return replace(run, sweep=sweep, problems=tuple(problems) + run.problems)


def sweep_once(settings: Settings, engine: Engine, now: datetime, actor: str,
               problems: list[str], should_stop: Callable[[], bool]) -> Sweep:
    """The inbox, before any check: a failure (e.g. a locked database) leaves the files for
    the next run and is a problem of this one."""
    try:
        return sweep_inbox(engine, settings, now, should_stop=should_stop)
    except Exception as exc:
        log.exception("sweeping the inbox failed")
        problems.append(f"inbox: {describe(exc)}")
        _record_failure(engine, None, describe(exc), now, actor, stage="inbox")
        return Sweep()


def work_round(settings: Settings, engine: Engine, *, now: datetime,
               mailer: Mailer | None = None, actor: str = "daemon",
               should_stop: Callable[[], bool] = lambda: False, holder: str | None = None,
               claim_ttl: timedelta = CLAIM_TTL, poll_seconds: float = CLAIM_POLL_SECONDS,
               clock: Callable[[], datetime] = lambda: datetime.now(UTC)) -> NightRun:
    """One worker's share of the night (:mod:`monitor.store.claims`): take a model, pull its
    SQL source, check it, mark it done; again until none is left to take; wait while other
    workers finish theirs (taking over the claims of those that died); then, if this worker
    is the one to wrap the round, queue and send the night's alerts, prune and write the team
    page. A stop request ends the loop between models and leaves the round to a later run
    (its digest goes out once, when the round is done).
    """
    through = yesterday(now, settings.timezone)
    holder = holder or holder_name()
    problems: list[str] = []
    results: list[ModelCheck] = []
    pulled: list[IngestSummary] = []
    stopped = wrapping = False
    round_id = claims.join_round(engine, through, holder, clock())
    done: tuple[claims.Claim, str] | None = None  # the last model, marked with the next take
    next_look = time.monotonic() + GONE_LOOK_SECONDS
    with _ClaimHeartbeat(engine, holder, claim_ttl, clock):
        while True:
            if should_stop():
                if done is not None:
                    claims.finish(engine, done[0], holder, clock(), done[1])
                stopped = True
                break
            claim = claims.take(engine, round_id, holder, clock(), claim_ttl, done=done)
            done = None
            if claim is not None:
                if claim.takes > 1:
                    log.warning("taking over model %s (its worker stopped renewing its claim)",
                                claim.model)
                pulled.extend(_pull_source(settings, engine, claim.model, now, actor,
                                           problems))
                outcome = _check_one(settings, engine, claim.model, through, now, actor)
                results.extend(outcome.results)
                failed = any(r.failure for r in outcome.results)
                done = (claim, "failed" if failed else "checked")
                if time.monotonic() >= next_look:  # a sibling killed meanwhile: free its
                    next_look = time.monotonic() + GONE_LOOK_SECONDS  # model now, not last
                    _free_the_gone(engine, round_id, claims.progress(engine, round_id,
                                                                     clock()).holders)
                continue
            state = claims.progress(engine, round_id, clock())
            if state.unfinished == 0:
                if state.wrapped:  # another worker wrapped it meanwhile
                    break
                wrapping = claims.try_wrap(engine, round_id, holder, clock(), claim_ttl)
                if wrapping or state.wrap_holder is None or \
                        not gone_from_this_host(state.wrap_holder):
                    break
                claims.release_wrap(engine, round_id, state.wrap_holder)  # it died wrapping
                continue
            _free_the_gone(engine, round_id, state.holders)
            if _wait(should_stop, poll_seconds):
                stopped = True
                break
        sent = pruned = None
        if wrapping:
            sent = _alert(settings, engine, now, mailer, actor, problems)
            pruned = _prune(settings, engine, now, actor, problems)
            if settings.report.dir:
                _team_page(settings, engine, now, actor, problems)
            claims.wrapped(engine, round_id, holder, clock())
    alerts, nights = sent if sent is not None else (None, ())
    return NightRun(now, through, Sweep(), tuple(pulled), CheckOutcome(tuple(results)),
                    nights, alerts, stopped, tuple(problems), pruned or (), wrapped=wrapping)


def _free_the_gone(engine: Engine, round_id: int, holders: Sequence[str]) -> None:
    """Free the claims of holders whose process is gone from this host (killed), at once."""
    for other in holders:
        if gone_from_this_host(other):
            log.warning("worker %s is gone; its models are free to take", other)
            claims.release_holder(engine, round_id, other)


def _wait(should_stop: Callable[[], bool], seconds: float) -> bool:
    """Sleep ``seconds`` in short steps; True as soon as a stop is requested."""
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if should_stop():
            return True
        time.sleep(min(0.1, max(0.0, end - time.monotonic())))
    return should_stop()


class _ClaimHeartbeat:
    """Renews this worker's claims (and wrap-up) every quarter of their expiry, in a thread,
    so a long check keeps its model and a dead worker's models expire."""

    def __init__(self, engine: Engine, holder: str, ttl: timedelta,
                 clock: Callable[[], datetime]):
        self.engine, self.holder, self.ttl, self.clock = engine, holder, ttl, clock
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._beat, name="claim-heartbeat", daemon=True)

    def __enter__(self) -> _ClaimHeartbeat:
        self.thread.start()
        return self

    def __exit__(self, *_exc: object) -> None:
        self.stop.set()
        self.thread.join()

    def _beat(self) -> None:
        while not self.stop.wait(self.ttl.total_seconds() / 4):
            try:
                claims.renew(self.engine, self.holder, self.clock(), self.ttl)
            except Exception:  # a database hiccup; the next beat tries again
                log.exception("renewing the claims of %s failed", self.holder)


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
