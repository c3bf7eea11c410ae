"""The read-only ``status`` view: where each model stands, why, and whether the nights run."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from datetime import UTC, date, datetime, timedelta
from typing import Any

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.action import Action
from monitor.domain.data_health import DataHealth
from monitor.domain.days import local_day, yesterday
from monitor.domain.model import ModelRecord
from monitor.domain.phrasing import fmt, held_reason
from monitor.domain.status import Status
from monitor.monitoring.data_health import model_data_health
from monitor.runtime.schedule import NightlyState, cron_trigger, nightly_state
from monitor.store import audit, lease, outbox
from monitor.store.access import database
from monitor.store.models import get_model, list_models
from monitor.store.outbox import Undelivered
from monitor.store.row_days import days_with_rows, last_observed_at
from monitor.store.standing import (
    LastStatus,
    VersionHead,
    active_head,
    last_status,
    version_number,
)

SHARPEN_RATIO = 1.5  # a bias chart limit this far above the exact-parameter one is "wide"


@dataclass(frozen=True)
class ModelStatus:
    model: str
    status: Status | None  # None: never checked
    since: date | None
    last_checked_day: date | None
    reasons: tuple[str, ...]
    active_version: int | None
    behind_days: int  # complete days not yet checked
    nightly: NightlyState | None = None  # None: no daemon has ever run on this database
    last_rows_day: date | None = None  # the latest day with stored rows
    sharpen: Sharpening | None = None  # refit a loosely pinned version on a longer window
    undelivered: Undelivered | None = None  # alert messages failed or waiting (all models)
    data: DataHealth | None = None  # findings about the data, apart from the status
    checked_version: int | None = None  # the version the last check scored with
    pending: tuple[Action, ...] = ()  # actions taking effect after the last checked day

    def as_dict(self) -> dict[str, Any]:
        return {"model": self.model, "status": self.status, "since": self.since,
                "last_checked_day": self.last_checked_day, "reasons": list(self.reasons),
                "active_version": self.active_version, "behind_days": self.behind_days,
                "last_rows_day": self.last_rows_day,
                "sharpen": self.sharpen.as_dict() if self.sharpen else None,
                "nightly": self.nightly.as_dict() if self.nightly else None,
                "data_health": self.data.as_dict() if self.data else None,
                "alerts_undelivered": self.undelivered.as_dict() if self.undelivered else None,
                "last_check_version": self.checked_version,
                "actions_pending": [a.as_dict() for a in self.pending]}

    def acted_since_check(self) -> bool:
        """A promotion, rollback or acknowledgement awaits its first check: the last check's
        status and reasons belong to the state before it."""
        return bool(self.pending) or (self.checked_version is not None
                                      and self.checked_version != self.active_version)

    def sentence(self) -> str:
        data = [f"  ! data: {d}" for d in self.data.sentences()] if self.data else []
        if self.status is None:
            head = f"{self.model}: not checked yet"
            if self.active_version is None:
                return "\n".join([head + " (no active version; run 'fitwatch model fit')", *data])
            return "\n".join([head + " (run 'fitwatch check')", *data])
        if self.acted_since_check():
            return "\n".join([self._after_action(), *data])
        head = (f"{self.model}: {self.status.upper()} since {self.since}, checked through "
                f"{self.last_checked_day} (version {self.active_version})") + self._lag()
        extra = [self.sharpen.sentence()] if self.sharpen else []
        return "\n".join([head, *data, *(f"  - {r}" for r in [*self.reasons, *extra])])

    def _lag(self) -> str:
        """Days not checked yet, and what the status judges when the feed went silent."""
        out = ""
        if self.behind_days > 0:
            out += f"; {self.behind_days} complete day(s) not checked yet"
        if self.data is not None and self.data.silent is not None:
            out += (f"; the status judges the days through {self.data.silent.last_rows_day}, "
                    "the last with rows" if self.data.silent.last_rows_day else
                    "; no day with rows has been checked")
        return out

    def _after_action(self) -> str:
        """What was done since the last check and what comes next; the last check's status
        follows, labelled as the state before the action (its standing-refit line, released
        by the action, left out)."""
        assert self.status is not None and self.last_checked_day is not None
        takeover = next((a for a in reversed(self.pending) if a.takes_over), None)
        ack = next((a for a in reversed(self.pending) if a.action == "ack"), None)
        if takeover is not None or ack is None:
            first = takeover.effective_day if takeover else None
            how = f" ({takeover.how()})" if takeover else ""
            since = f" since {first}" if first else ""
            head = (f"{self.model}: version {self.active_version} active{since}{how}; not "
                    "checked with it yet" + (f": the next check scores from {first} with fresh "
                                             "charts" if first else ""))
            label = f"last night under version {self.checked_version}"
        else:
            head = (f"{self.model}: {self.status.upper()} {ack.how()}; the model stays on "
                    f"version {self.active_version} until you refit or the evidence changes; "
                    f"its charts restart on {ack.effective_day}, the first day not checked yet")
            label = f"last check before the acknowledgement, under version {self.checked_version}"
        head += self._lag()
        before = [r for r in self.reasons if r != held_reason(self.since)]
        return "\n".join([head, f"  {label} ({self.last_checked_day}): {self.status.upper()} "
                                 f"since {self.since}", *(f"    - {r}" for r in before)])


def model_statuses(settings: Settings, names: Sequence[str] | None = None, *,
                   now: datetime | None = None, engine: Engine | None = None) -> list[ModelStatus]:
    now = now or datetime.now(UTC)
    last_day = yesterday(now, settings.timezone)
    cron_trigger(settings)  # status reports the schedule: a cron it cannot read is said first
    out = []
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        models = [get_model(conn, n) for n in names] if names else list_models(conn)
        leases = lease.read_all(conn)
        nightly = nightly_state(settings, leases[0], now, leases[1:]) if leases else None
        trouble = outbox.undelivered(conn)
        for model in models:
            last = last_status(conn, model.id)
            active = active_head(conn, model.id)
            latest = last_observed_at(conn, model)
            rows_day = local_day(latest, settings.timezone) if latest else None
            status = _status(model, last, active, last_day)
            if last is not None:
                status = replace(
                    status, pending=tuple(audit.actions(conn, model.id,
                                                        last.day + timedelta(days=1),
                                                        settings.timezone)),
                    checked_version=(active.number if active and active.id == last.version_id
                                     else version_number(conn, last.version_id)))
            advice = None
            if active is not None and status.status == Status.OK \
                    and not status.acted_since_check():
                since = (len(days_with_rows(conn, model, active.fit_start))
                         if active.fit_start else 0)
                advice = sharpen_advice(model.name, active, since)
            data = model_data_health(conn, model, settings.for_model(model.name).check, active,
                                     through=last.day if last else None, now=now,
                                     zone=settings.timezone)
            out.append(replace(status, nightly=nightly, last_rows_day=rows_day,
                               sharpen=advice, undelivered=trouble or None,
                               data=data if data.stands else None))
    return out


@dataclass(frozen=True)
class Sharpening:
    """Advice to refit a version whose bias chart is wide only for want of days."""

    model: str
    version: int
    fit_days: int
    h: float
    h_known: float
    days_since_start: int
    start: date

    def as_dict(self) -> dict[str, Any]:
        return {**{f: getattr(self, f) for f in self.__dataclass_fields__},
                "command": self.command(), "sentence": self.sentence()}

    def command(self) -> str:
        return f"fitwatch refit {self.model} --start {self.start}"

    def sentence(self) -> str:
        return (f"Version {self.version} was fitted on {self.fit_days} days, so its bias chart "
                f"needs a limit of {fmt(self.h, 3)} ({fmt(self.h_known, 3)} if its estimates "
                f"were exact); {self.days_since_start} days with rows have come since "
                f"{self.start}: '{self.command()}' would sharpen it")


def sharpen_advice(name: str, version: VersionHead,
                   days_since_fit_start: int) -> Sharpening | None:
    """Say so when the version's bias chart is wide only for want of days, and days have come.

    A version fitted on a short window (typically right after a change) pins the line down
    loosely; the limit that keeps false alarms rare is then far above the one exact parameters
    would need. Once at least twice as many days with rows exist from the same start, a refit
    on them tightens the chart without changing the line much (``compare`` then recommends it).
    """
    h, h_known, fit_days = version.h, version.h_known, version.fit_days
    if (h is None or h_known is None or not fit_days or version.fit_start is None
            or h < SHARPEN_RATIO * h_known or days_since_fit_start < 2 * fit_days):
        return None
    return Sharpening(name, version.number, int(fit_days), h, h_known, days_since_fit_start,
                      version.fit_start)


def _status(model: ModelRecord, last: LastStatus | None, active: VersionHead | None,
            last_day: date) -> ModelStatus:
    number = active.number if active else None
    if last is None:
        behind = 0
        if active is not None and active.active_from is not None:
            behind = max(0, (last_day - active.active_from).days + 1)
        return ModelStatus(model.name, None, None, None, (), number, behind)
    return ModelStatus(model.name, last.status, last.since, last.day,
                       tuple(last.reasons), number, max(0, (last_day - last.day).days))
