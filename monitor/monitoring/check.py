"""The nightly check: for each model, every unchecked (or stale) day up to a date.

Per model: find where to start (the day after the last check, or the earliest day whose rows
changed after it was checked), then walk the days in blocks. Each block is one transaction
with one query for its observations and one for the day statistics it needs; inside the block
a Python loop over days (never over rows) scores, moves the signals and decides. Rerunning
changes nothing; late rows make the next run recompute from their day, so the result equals
processing everything in order.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, timedelta

from sqlalchemy import Connection, Engine

from monitor.config import CheckSettings, ModelSettings, Settings
from monitor.domain.check import Carry, DayCheck
from monitor.domain.days import local_day
from monitor.domain.model import ModelRecord, check_model_section, check_model_sections
from monitor.domain.status import Status, worst
from monitor.domain.version import Version
from monitor.errors import Failure, FitwatchError, InputError
from monitor.interface.progress import progress_bar
from monitor.monitoring.context import VersionContext, slope_limits_of
from monitor.monitoring.walk import HISTORY_DAYS, Subject, Timeline, walk
from monitor.store import audit
from monitor.store.access import database
from monitor.store.checks import (
    delete_checks_from,
    earliest_stale_day,
    insert_checks,
    last_check,
    load_checks,
)
from monitor.store.engine import write_transaction
from monitor.store.model_lock import model_lock
from monitor.store.models import get_model, list_models
from monitor.store.observations import load_day_stats, load_observations
from monitor.store.versions import scoring_versions, store_slope_limits

log = logging.getLogger(__name__)
BLOCK_DAYS = 31


@dataclass(frozen=True)
class ModelCheck:
    """What one run did for one model."""

    model: str
    checks: tuple[DayCheck, ...]
    first_day: date | None
    last_day: date | None
    recomputed_from: date | None  # set when late rows forced a re-evaluation
    note: str = ""
    failure: Failure | None = None  # set when the model could not be checked
    # the model's latest check, new or stored before; with ``check --day`` that day's check
    current: DayCheck | None = None
    reported_day: date | None = None  # ``check --day``: the one day reported
    checked_before: bool = False  # ``check --day``: that day was checked by an earlier run

    @property
    def error(self) -> str | None:
        return self.failure.message if self.failure else None


@dataclass(frozen=True)
class CheckOutcome:
    results: tuple[ModelCheck, ...] = field(default=())

    @property
    def checks(self) -> list[DayCheck]:
        return [c for r in self.results for c in r.checks]

    def worst_status(self) -> Status | None:
        return worst(r.current.status for r in self.results if r.current)


def run_checks(settings: Settings, names: Sequence[str] | None = None, *,
               day: date | None = None, through: date | None = None,
               now: datetime | None = None, progress: bool = False,
               engine: Engine | None = None) -> CheckOutcome:
    """Check every unchecked day through ``through`` (default: yesterday in the configured zone).

    ``day`` checks up to that day and reports only it. One model's failure is recorded in its
    result and does not stop the others.
    """
    now = now or datetime.now(UTC)
    today = local_day(now, settings.timezone)
    end = day or through or (today - timedelta(days=1))
    if end >= today:
        raise InputError(f"{end} is not over yet in {settings.timezone.key} (today is {today}); "
                         "checks run on complete days, through yesterday at the latest")
    with database(settings, engine) as db:
        return CheckOutcome(tuple(_check_all(db, settings, names, day, end, now, progress)))


def _check_all(engine: Engine, settings: Settings, names: Sequence[str] | None,
               day: date | None, end: date, now: datetime, progress: bool) -> list[ModelCheck]:
    with engine.connect() as conn:
        models = [get_model(conn, n) for n in names] if names else list_models(conn)
    if not names:
        check_model_sections(settings, models)
    results = []
    for model in models:
        try:
            check_model_section(settings, model)
            with model_lock(engine, model.id, model.name):  # one checker per model
                result = check_model(engine, model, settings.for_model(model.name), end, now,
                                     progress=progress)
        except FitwatchError as exc:
            if names:
                raise
            result = ModelCheck(model.name, (), None, None, None, failure=Failure.of(exc))
        except Exception as exc:  # one model's bug must not stop the night for the others
            log.exception("checking model %s failed", model.name)
            if names and len(names) == 1:
                raise
            result = ModelCheck(model.name, (), None, None, None, failure=Failure.of(exc))
        if day is not None:
            result = _only_day(engine, model, result, day)
        results.append(result)
    return results


def _only_day(engine: Engine, model: ModelRecord, result: ModelCheck, day: date) -> ModelCheck:
    """The run's result narrowed to ``day``: its check (new or stored before) is what is
    reported and what ``--fail-on`` judges, not the model's status today."""
    with engine.connect() as conn:
        stored = load_checks(conn, model.id, day, day, model=model.name)
    new = any(c.day == day for c in result.checks)
    return ModelCheck(model.name, tuple(stored), day if stored else None,
                      day if stored else None, result.recomputed_from, result.note, result.failure,
                      current=stored[-1] if stored else None, reported_day=day,
                      checked_before=bool(stored) and not new)


def check_model(engine: Engine, model: ModelRecord, settings: ModelSettings, end: date,
                now: datetime, *, progress: bool = False) -> ModelCheck:
    with engine.connect() as conn:
        versions = scoring_versions(conn, model.id)
        if not versions:  # not a failure: one model waiting for its fit must not fail a night
            return ModelCheck(model.name, (), None, None, None,
                              note=f"no active version yet (fit one with 'fitwatch model fit "
                                   f"{model.name} ...'); not checked")
        last = last_check(conn, model.id)
        stale = earliest_stale_day(conn, model.id)
    start = versions[0].active_from if last is None else last.day + timedelta(days=1)
    assert start is not None
    recomputed = None
    if stale is not None and last is not None and stale <= last.day:
        recomputed, start, end = stale, stale, max(end, last.day)
    if start > end:
        note = (f"checked through {last.day.isoformat()}" if last
                else f"nothing to check before {start.isoformat()}")
        return ModelCheck(model.name, (), None, None, None, note=note, current=last)
    days = (end - start).days + 1
    done: list[DayCheck] = []
    with progress_bar(days, f"checking {model.name}", enabled=progress) as bar:
        block_start = start
        first = True
        while block_start <= end:
            block_end = min(end, block_start + timedelta(days=BLOCK_DAYS - 1))
            # one snapshot for the block: the rows and the day statistics (with the revision
            # the check records) must describe the same state, or a day could be stored as
            # checked at a revision whose rows it did not score
            with write_transaction(engine, snapshot=True) as conn:
                if first:
                    delete_checks_from(conn, model.id, start)
                    first = False
                checks = _check_block(conn, model, settings, versions, block_start, block_end,
                                      now)
                insert_checks(conn, checks)
            done.extend(checks)
            bar.update((block_end - block_start).days + 1)
            block_start = block_end + timedelta(days=1)
    return ModelCheck(model.name, tuple(done), start, end, recomputed,
                      current=done[-1] if done else last)


def _check_block(conn: Connection, model: ModelRecord, settings: ModelSettings,
                 versions: list[Version], first: date, last: date,
                 now: datetime) -> list[DayCheck]:
    """Load what the days ``first..last`` need (one query each), then walk them."""
    cs = settings.check
    carry = _carry_before(conn, model, first, carried_days(cs))
    obs = load_observations(conn, model, first, last)
    stats_from = first - timedelta(days=max(cs.test_window_days - 1, HISTORY_DAYS))
    stored = load_day_stats(conn, model, stats_from, last)
    timeline = Timeline(obs.days, obs.x, obs.y, stored.moments, stored.revisions)
    resets = frozenset(e.effective_day for e in audit.entries(conn, model.id, ("ack",),
                                                                from_day=first)
                       if e.effective_day is not None and e.effective_day <= last)
    subject = Subject(model.id, model.name, model.response, settings)
    contexts: dict[int, VersionContext] = {}
    checks, _ = walk(subject, versions, timeline, first, last, carry, now=now, resets=resets,
                     contexts=contexts)
    _keep_solved_limits(conn, versions, contexts, cs)
    return checks


def _keep_solved_limits(conn: Connection, versions: list[Version],
                        contexts: dict[int, VersionContext], cs: CheckSettings) -> None:
    """Slope-chart limits solved tonight because those stored with a version were for other
    settings (a version fitted before an upgrade, or a changed setting) are stored with it, so
    the root search runs once per version and settings rather than every night. ``versions``
    is updated in place for the blocks still to come."""
    for i, version in enumerate(versions):
        ctx = contexts.get(version.id)
        if ctx is None or ctx.slope_chart is None:
            continue
        limits = slope_limits_of(ctx.slope_chart, cs)
        if limits is None or version.baseline.slope_limits == limits:
            continue
        store_slope_limits(conn, version.id, limits)
        versions[i] = version.with_slope_limits(limits)


def carried_days(settings: CheckSettings) -> int:
    """How many days back the carry keeps (the coverage window and the spread test's)."""
    return max(settings.coverage_window_days, settings.test_window_days)


def _carry_before(conn: Connection, model: ModelRecord, day: date, window: int) -> Carry:
    previous = last_check(conn, model.id, before=day, model=model.name)
    if previous is None:
        return Carry.initial()
    earlier = load_checks(conn, model.id, day - timedelta(days=window - 1),
                          day - timedelta(days=1))
    return Carry.after(previous, tuple(c.coverage_day for c in earlier))
