"""``replay``: the nightly checks over a history file, in memory, for tuning thresholds.

The file's valid rows are read as ingestion would read them (nothing is stored). A version is
fitted on the first part (``--fit-end``, default the first 60 days) and every later day is
checked exactly as the nightly run would, with the settings in force. Nothing touches the
database except, optionally, reading the model's columns from it.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
from sqlalchemy.exc import SQLAlchemyError

from monitor.config import ModelSettings, Settings
from monitor.domain.check import Carry, DayCheck
from monitor.domain.days import as_date
from monitor.domain.model import ModelSpec
from monitor.domain.status import Status
from monitor.domain.version import Version, VersionDraft, VersionState
from monitor.errors import DatabaseError, InputError, StateError
from monitor.ingest.frame import FileRows, read_rows
from monitor.ingest.service import options_for
from monitor.lifecycle.fit import FittedVersion, fit_window
from monitor.monitoring.walk import Subject, Timeline, walk
from monitor.store.access import database
from monitor.store.models import find_model

DEFAULT_FIT_DAYS = 60
NOT_STORED = 0  # the model id of checks that a replay computes and never stores


@dataclass(frozen=True)
class Episode:
    """A run of consecutive days in one alerting status."""

    status: Status
    first_day: date
    last_day: date
    reasons: tuple[str, ...]  # those of its first day

    @property
    def days(self) -> int:
        return (self.last_day - self.first_day).days + 1


@dataclass(frozen=True, eq=False)
class ReplayReport:
    model: ModelSpec
    rows: FileRows
    fitted: FittedVersion
    version: Version
    checks: tuple[DayCheck, ...]
    acknowledged: bool

    def episodes(self, status: Status = Status.REFIT) -> list[Episode]:
        out: list[Episode] = []
        for c in self.checks:
            if c.status != status:
                continue
            if out and out[-1].last_day == c.day - timedelta(days=1):
                last = out[-1]
                out[-1] = Episode(status, last.first_day, c.day, last.reasons)
            else:
                out.append(Episode(status, c.day, c.day, tuple(c.reasons)))
        return out

    def counts(self) -> dict[Status, int]:
        return {s: sum(c.status == s for c in self.checks) for s in Status}


def replay(settings: Settings, name: str, path: Path, *, columns: ModelSpec | None = None,
           fit_end: date | None = None, acknowledge_refits: bool = False,
           now: datetime | None = None) -> ReplayReport:
    now = now or datetime.now(UTC)
    model = _model(settings, name, columns)
    ms = settings.for_model(name)
    rows = read_rows(path, model, options_for(settings, name, now=now))
    if rows.accepted == 0:
        raise InputError(f"{path}: no usable rows to replay")
    first = as_date(rows.days.min())
    end = fit_end or first + timedelta(days=DEFAULT_FIT_DAYS - 1)
    in_fit = rows.days <= np.datetime64(end, "D")
    if not in_fit.any() or in_fit.all():
        raise InputError(f"{path}: the rows run from {first} to {as_date(rows.days.max())}; "
                         f"a fit window ending {end} leaves nothing to fit or nothing to check")
    fitted, version, checks = replay_arrays(model, ms, rows.days, rows.x, rows.y, end,
                                            acknowledge_refits=acknowledge_refits, now=now)
    return ReplayReport(model, rows, fitted, version, checks, acknowledge_refits)


def replay_arrays(model: ModelSpec, settings: ModelSettings, days: np.ndarray, x: np.ndarray,
                  y: np.ndarray, fit_end: date, *, acknowledge_refits: bool = False,
                  now: datetime) -> tuple[FittedVersion, Version, tuple[DayCheck, ...]]:
    """Fit on the rows through ``fit_end`` and check every later day, as the nights would.

    ``days`` stamps each row ``(x[i], y[i])`` with its local day; rows need not be sorted.
    The in-memory core of :func:`replay`, also driven by the simulations in the benchmarks.
    """
    row_days = np.asarray(days, dtype="datetime64[D]")
    in_fit = row_days <= np.datetime64(fit_end, "D")
    level = settings.check.level
    fitted = fit_window(x[in_fit], y[in_fit], row_days[in_fit], model.predictors, level,
                        settings.check)
    version = in_memory_version(fitted.draft(level), now)
    timeline = Timeline.from_rows(row_days, x, y)
    assert version.active_from is not None
    checks, _ = walk(Subject(NOT_STORED, model.name, model.response, settings), [version],
                     timeline, version.active_from, as_date(row_days.max()), Carry.initial(),
                     now=now, acknowledge_refits=acknowledge_refits)
    return fitted, version, tuple(checks)


def in_memory_version(draft: VersionDraft, now: datetime) -> Version:
    """The active version a replay scores with: version 1, from the day after its window."""
    assert draft.fit_end is not None
    return Version(id=1, model_id=NOT_STORED, number=1, state=VersionState.ACTIVE,
                   draft=draft, active_from=draft.fit_end + timedelta(days=1),
                   active_until=None, created_at=now, created_by="replay")


def _model(settings: Settings, name: str, columns: ModelSpec | None) -> ModelSpec:
    """The model's columns: as given, else as stored in the database."""
    if columns is not None:
        return columns
    try:
        with database(settings, sections="warn") as engine, engine.connect() as conn:
            stored = find_model(conn, name)
    except (DatabaseError, SQLAlchemyError) as exc:
        raise StateError(f"cannot read model '{name}' from the database ({exc}); give its "
                         "columns with --y, --x and --time instead") from exc
    if stored is None:
        raise StateError(f"model '{name}' is not in the database; give its columns with --y, "
                         "--x and --time")
    return stored.spec
