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
from typing import Any

import numpy as np
from sqlalchemy.exc import SQLAlchemyError

from monitor.config import Settings
from monitor.domain.days import as_date
from monitor.errors import DatabaseError, InputError, StateError
from monitor.ingest.frame import FileRows, read_rows
from monitor.ingest.service import options_for
from monitor.interface.check_view import day_document
from monitor.interface.output import fmt
from monitor.interface.status import VersionView
from monitor.lifecycle.fit import FittedVersion, fit_window
from monitor.monitoring.evaluate import Carry
from monitor.monitoring.walk import Subject, Timeline, walk
from monitor.stats.decision import REFIT, WATCH
from monitor.store.access import database
from monitor.store.checks import DayCheck
from monitor.store.models import ModelRecord, ModelSpec, find_model
from monitor.store.versions import VersionRecord, draft_record

DEFAULT_FIT_DAYS = 60


@dataclass(frozen=True)
class Episode:
    """A run of consecutive days in one alerting status."""

    status: str
    first_day: date
    last_day: date
    reasons: tuple[str, ...]  # those of its first day

    @property
    def days(self) -> int:
        return (self.last_day - self.first_day).days + 1


@dataclass(frozen=True, eq=False)
class ReplayReport:
    model: ModelRecord
    rows: FileRows
    fitted: FittedVersion
    version: VersionRecord
    checks: tuple[DayCheck, ...]
    acknowledged: bool

    def episodes(self, status: str = REFIT) -> list[Episode]:
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

    def counts(self) -> dict[str, int]:
        return {s: sum(c.status == s for c in self.checks) for s in ("ok", WATCH, REFIT)}

    def as_dict(self) -> dict[str, Any]:
        return {
            "model": self.model.name, "source": self.rows.source,
            "rows": {"read": self.rows.read, "used": self.rows.accepted,
                     "duplicates": self.rows.duplicates, "rejected": self.rows.rejected,
                     "reasons": dict(self.rows.reasons)},
            "version": VersionView(self.model, self.version).as_dict(),
            "days": len(self.checks), "status_days": self.counts(),
            "acknowledge_refits": self.acknowledged,
            "episodes": [{"status": e.status, "first_day": e.first_day, "last_day": e.last_day,
                          "days": e.days, "reasons": list(e.reasons)}
                         for s in (REFIT, WATCH) for e in self.episodes(s)],
            "checks": [day_document(c) for c in self.checks],
        }

    def text(self) -> str:
        r, f = self.rows, self.fitted.fit
        terms = " + ".join(fmt(v, 4) + ("" if t == "intercept" else f" × {t}")
                           for t, v in zip(f.terms, f.coef, strict=True))
        counts = self.counts()
        lines = [
            f"replay of {self.model.name} on {r.source}: {r.read:,} rows read, {r.accepted:,} "
            f"used, {r.duplicates:,} duplicates, {r.rejected:,} rejected",
            f"fitted on {self.fitted.first_day} .. {self.fitted.last_day}: "
            f"{self.model.response} = {terms} (s = {fmt(f.s, 4)}, h = "
            f"{fmt(self.version.cusum_h, 3)})",
        ]
        if not self.checks:
            lines.append("no days after the fit window to check")
            return "\n".join(lines)
        refits, watches = self.episodes(REFIT), self.episodes(WATCH)
        lines.append(
            f"checked {self.checks[0].day} .. {self.checks[-1].day} ({len(self.checks)} days): "
            f"{counts['ok']} ok, {counts[WATCH]} watch, {counts[REFIT]} refit; "
            f"{len(refits)} refit and {len(watches)} watch episode(s)"
            + (" (each refit acknowledged the next day)" if self.acknowledged else ""))
        for e in sorted(refits + watches, key=lambda e: e.first_day):
            lines.append(f"  {e.first_day} {e.status.upper()} for {e.days} day(s):")
            lines.extend(f"    - {reason}" for reason in e.reasons)
        return "\n".join(lines)


def replay(settings: Settings, name: str, path: Path, *, columns: ModelSpec | None = None,
           fit_end: date | None = None, acknowledge_refits: bool = False,
           now: datetime | None = None) -> ReplayReport:
    now = now or datetime.now(UTC)
    model = _model(settings, name, columns, now)
    ms = settings.for_model(name)
    rows = read_rows(path, model.spec, options_for(settings, name, now=now))
    if rows.accepted == 0:
        raise InputError(f"{path}: no usable rows to replay")
    first = as_date(rows.days.min())
    end = fit_end or first + timedelta(days=DEFAULT_FIT_DAYS - 1)
    in_fit = rows.days <= np.datetime64(end, "D")
    if not in_fit.any() or in_fit.all():
        raise InputError(f"{path}: the rows run from {first} to {as_date(rows.days.max())}; "
                         f"a fit window ending {end} leaves nothing to fit or nothing to check")
    level = ms.check.level
    fitted = fit_window(rows.x[in_fit], rows.y[in_fit], rows.days[in_fit], model.predictors,
                        level, ms.check)
    version = draft_record(fitted.to_new_version(level, ms.check),
                           active_from=fitted.last_day + timedelta(days=1), now=now,
                           actor="replay")
    timeline = Timeline.from_rows(rows.days, rows.x, rows.y)
    assert version.active_from is not None
    checks, _ = walk(Subject(0, name, model.response, ms), [version], timeline,
                     version.active_from, as_date(rows.days.max()), Carry.initial(), now=now,
                     acknowledge_refits=acknowledge_refits)
    return ReplayReport(model, rows, fitted, version, tuple(checks), acknowledge_refits)


def _model(settings: Settings, name: str, columns: ModelSpec | None,
           now: datetime) -> ModelRecord:
    """The model's columns: as given, else as stored in the database."""
    if columns is not None:
        return ModelRecord(name=name, response=columns.response, predictors=columns.predictors,
                           time_column=columns.time_column, id_column=columns.id_column,
                           id=0, created_at=now)
    try:
        with database(settings) as engine, engine.connect() as conn:
            stored = find_model(conn, name)
    except (DatabaseError, SQLAlchemyError) as exc:
        raise StateError(f"cannot read model '{name}' from the database ({exc}); give its "
                         "columns with --y, --x and --time instead") from exc
    if stored is None:
        raise StateError(f"model '{name}' is not in the database; give its columns with --y, "
                         "--x and --time")
    return stored
