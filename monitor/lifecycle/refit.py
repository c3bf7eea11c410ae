"""Acting on the advice: refit a candidate, promote it, roll back, or acknowledge.

Each action takes effect on the model's next unchecked day and is written to the audit log with
who, when and why, so that re-evaluating old days (late rows) replays the same history: the
version in force on each day, and the days on which the bias chart restarted.

A version scores one unbroken run of days. Rolling back therefore stores a copy of the earlier
version under a new number rather than reopening the old one's run.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from datetime import UTC, date, datetime, timedelta
from typing import Any

from sqlalchemy import Connection, Engine

from monitor.config import Settings
from monitor.domain.action import Action
from monitor.domain.check import DayCheck
from monitor.domain.model import ModelRecord
from monitor.domain.status import Status
from monitor.domain.version import Version, VersionState
from monitor.errors import StateError, UsageError
from monitor.lifecycle.compare import Comparison, compare
from monitor.lifecycle.fit import FitRequest, actor_name, fit_model
from monitor.store import audit
from monitor.store.access import database
from monitor.store.checks import last_check
from monitor.store.engine import write_transaction
from monitor.store.models import get_model
from monitor.store.versions import (
    active_version,
    get_version,
    insert_version,
    list_versions,
    set_state,
)


@dataclass(frozen=True)
class Transition:
    """What an action changed, for the log and for people."""

    model: str
    action: str  # promote | rollback | ack
    effective_day: date
    active: int | None  # the version in force from effective_day
    previous: int | None  # the version in force before it
    reason: str | None
    actor: str
    copy_of: int | None = None  # rollback: the earlier version whose line is active again
    advice: Status | None = None  # ack: the status acknowledged ...
    advice_since: date | None = None  # ... and the day it was first advised
    previous_scored: bool = True  # False: rolled back before the previous version scored a day

    def as_dict(self) -> dict[str, Any]:
        return {f.name: getattr(self, f.name) for f in fields(self)}

    def sentence(self) -> str:
        why = f" ({self.reason})" if self.reason else ""
        if self.action == "ack":
            advice = (f"the {self.advice} advice (since {self.advice_since})"
                      if self.advice and self.advice_since else "the advice")
            return (f"{self.model}: {advice} acknowledged by {self.actor}{why}; the model stays "
                    f"on version {self.active} and its charts restart on {self.effective_day}, "
                    "the first day not checked yet")
        if self.action == "rollback":
            return (f"{self.model}: rolled back to version {self.copy_of} by {self.actor}{why}: "
                    f"its line is active again as version {self.active} (a copy under a new "
                    "number, because each version scores one unbroken run of days) and scores "
                    f"days from {self.effective_day}; version {self.previous} "
                    + ("scored the days before" if self.previous_scored else
                       "never scored a day (its promotion had not taken effect)"))
        return (f"{self.model}: version {self.active} promoted by {self.actor}{why}; it scores "
                f"days from {self.effective_day} (version {self.previous} scored the days "
                "before)")


def refit(settings: Settings, name: str, *, start: date | None = None, end: date | None = None,
          holdout_days: int | None = None, now: datetime | None = None,
          actor: str | None = None, engine: Engine | None = None) -> Comparison:
    """``refit``: a candidate on the days since the estimated change, compared with the active.

    ``start`` defaults to the change day the last check estimated (else the bias chart's onset),
    ``end`` to the last checked day; the candidate is stored and then compared on held-out days.
    """
    now, actor = now or datetime.now(UTC), actor or actor_name()
    with database(settings, engine) as db:
        with db.connect() as conn:
            model = get_model(conn, name)
            _active(conn, model)
            last = last_check(conn, model.id)
        if start is None:
            start = _estimated_change(name, last)
        if end is None and last is not None:
            end = last.day
        report = fit_model(settings, FitRequest(name, start=start, end=end), now=now,
                           actor=actor, engine=db)
        return compare(settings, name, candidate=report.version.number,
                       holdout_days=holdout_days, engine=db)


def _estimated_change(name: str, last: DayCheck | None) -> date:
    found = None
    if last is not None and last.status != Status.OK:
        found = last.change_day or last.cusum_onset
    if last is None or found is None:
        said = ("has not been checked yet" if last is None
                else f"is {last.status} and no change day has been estimated")
        raise UsageError(f"'{name}' {said}; give the first day of the new window with --start")
    return found


def promote(settings: Settings, name: str, number: int, *, reason: str | None = None,
            now: datetime | None = None, actor: str | None = None,
            engine: Engine | None = None) -> Transition:
    """Make candidate version ``number`` the active one from the next unchecked day."""
    now, actor = now or datetime.now(UTC), actor or actor_name()
    with database(settings, engine) as db, write_transaction(db) as conn:
        model = get_model(conn, name)
        candidate = get_version(conn, model.id, number, model_name=name)
        if candidate.state != VersionState.CANDIDATE:
            raise StateError(f"version {number} of '{name}' is {candidate.state}, not a "
                             "candidate; only candidates can be promoted")
        current = _active(conn, model)
        day = _next_day(conn, model, current)
        if candidate.fit_end is not None:
            day = max(day, candidate.fit_end + timedelta(days=1))
        _hand_over(conn, current, candidate, day)
        audit.record(conn, action="promote", actor=actor, at=now, model_id=model.id,
                     reason=reason, version_id=candidate.id, effective_day=day,
                     details={"version": number, "previous": current.number})
    return Transition(name, "promote", day, number, current.number, reason, actor)


def rollback(settings: Settings, name: str, *, reason: str | None = None,
             now: datetime | None = None, actor: str | None = None,
             engine: Engine | None = None) -> Transition:
    """Bring back the version that was active before the current one, as a new number.

    Each version scores one unbroken run of days (the checks and the audit log replay that
    history), so the earlier version's record stays as it was and a copy of its line takes
    over on the next unchecked day, with fresh charts.
    """
    now, actor = now or datetime.now(UTC), actor or actor_name()
    with database(settings, engine) as db, write_transaction(db) as conn:
        model = get_model(conn, name)
        current = _active(conn, model)
        earlier = [v for v in list_versions(conn, model.id)
                   if v.active_from is not None and v.id != current.id
                   and (current.active_from is None or v.active_from <= current.active_from)]
        if not earlier:
            raise StateError(f"'{name}' has had no other active version to roll back to")
        target = max(earlier, key=lambda v: (v.active_from, v.number))
        day = _next_day(conn, model, current)
        copy = insert_version(conn, model.id, target.copied(f"copy of version {target.number}"),
                              state=VersionState.CANDIDATE,
                              active_from=None, now=now, actor=actor)
        scored = current.active_from is not None and current.active_from < day
        _hand_over(conn, current, copy, day)
        for v in earlier:  # a promotion not in force yet left its predecessor scoring past day
            if v.active_from is not None and v.active_from < day \
                    and v.active_until is not None and v.active_until >= day:
                set_state(conn, v, state=v.state, active_from=v.active_from,
                          active_until=day - timedelta(days=1))
        audit.record(conn, action="rollback", actor=actor, at=now, model_id=model.id,
                     reason=reason, version_id=copy.id, effective_day=day,
                     details={"version": copy.number, "copy_of": target.number,
                              "previous": current.number, "previous_scored": scored})
    return Transition(name, "rollback", day, copy.number, current.number, reason, actor,
                      copy_of=target.number, previous_scored=scored)


def acknowledge(settings: Settings, name: str, *, reason: str | None = None,
                now: datetime | None = None, actor: str | None = None,
                engine: Engine | None = None) -> Transition:
    """Accept the current advice without a new version: the chart restarts, a refit is released.

    Refused (a :class:`StateError`, nothing recorded) when there is no advice, when the advice
    was already acknowledged and no day has been checked since, and when a promotion or
    rollback not yet checked will restart the charts anyway.
    """
    now, actor = now or datetime.now(UTC), actor or actor_name()
    with database(settings, engine) as db, write_transaction(db) as conn:
        model = get_model(conn, name)
        current = _active(conn, model)
        last = last_check(conn, model.id)
        if last is None or last.status == Status.OK:
            state = "not been checked yet" if last is None else f"been ok since {last.status_since}"
            raise StateError(f"'{name}' has {state}: there is no advice to acknowledge")
        day = last.day + timedelta(days=1)
        _refuse_pending(name, last, audit.actions(conn, model.id, day, settings.timezone))
        audit.record(conn, action="ack", actor=actor, at=now, model_id=model.id, reason=reason,
                     version_id=current.id, effective_day=day,
                     details={"status": last.status, "since": last.status_since.isoformat(),
                              "version": current.number})
    return Transition(name, "ack", day, current.number, current.number, reason, actor,
                      advice=last.status, advice_since=last.status_since)


def _refuse_pending(name: str, last: DayCheck, pending: list[Action]) -> None:
    """An acknowledgement changes nothing while an earlier action awaits its first check."""
    takeover = next((a for a in reversed(pending) if a.takes_over), None)
    if takeover is not None:
        raise StateError(
            f"'{name}': version {takeover.version} takes over on {takeover.effective_day} "
            f"({takeover.how()}) with fresh charts, so the advice of the days before is "
            "released already and there is none under it yet; nothing changed")
    ack = next((a for a in reversed(pending) if a.action == "ack"), None)
    if ack is not None:
        raise StateError(
            f"'{name}': the {last.status} advice (since {last.status_since}) was already "
            f"{ack.how()}; the charts restart on {ack.effective_day}, the first day not "
            "checked yet; nothing changed")


def _active(conn: Connection, model: ModelRecord) -> Version:
    current = active_version(conn, model.id)
    if current is None:
        raise StateError(f"'{model.name}' has no active version; fit one with "
                         f"'fitwatch model fit {model.name} ...'")
    return current


def _next_day(conn: Connection, model: ModelRecord, current: Version) -> date:
    """The first day not checked yet (changes never rewrite checked days)."""
    last = last_check(conn, model.id)
    if last is not None:
        return last.day + timedelta(days=1)
    assert current.active_from is not None
    return current.active_from


def _hand_over(conn: Connection, current: Version, incoming: Version, day: date) -> None:
    set_state(conn, current, state=VersionState.RETIRED, active_from=current.active_from,
              active_until=day - timedelta(days=1))
    set_state(conn, incoming, state=VersionState.ACTIVE, active_from=day, active_until=None)
