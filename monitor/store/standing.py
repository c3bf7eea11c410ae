"""Where a model stands, read from plain columns: its versions' numbers and the last status.

The views that only name versions or say a status (``model list``, ``status``) read these
instead of whole versions and day checks: decoding those builds the fitted arrays, the
baseline and the charts' state, which takes numpy and the statistics modules. For one model
that is most of a quick command's start-up; for thousands of models, most of its work.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date

from sqlalchemy import Connection, select

from monitor.domain.status import Status
from monitor.domain.version_state import VersionState
from monitor.store.schema import day_checks, versions


@dataclass(frozen=True)
class VersionNumber:
    """A stored version by id, number and state."""

    id: int
    number: int
    state: VersionState


@dataclass(frozen=True)
class VersionHead:
    """What a status line says of the active version: its number, its days, how many days it
    was fitted on and its bias chart's limits (read from columns and two keys of the fit's
    JSON, never decoded into arrays)."""

    id: int
    number: int
    fit_start: date | None
    fit_end: date | None
    active_from: date | None
    fit_days: int | None  # days with rows in the fit window
    h: float | None  # the bias chart's limit (None: not calibrated)
    h_known: float | None  # the limit exact parameters would need


@dataclass(frozen=True)
class LastStatus:
    """The latest day check of a model: its day, status and reasons, and the scoring version."""

    day: date
    status: Status
    since: date
    reasons: tuple[str, ...]
    version_id: int


def version_numbers(conn: Connection, model_id: int) -> list[VersionNumber]:
    """The model's versions, oldest first."""
    rows = conn.execute(select(versions.c.id, versions.c.number, versions.c.state)
                        .where(versions.c.model_id == model_id).order_by(versions.c.number))
    return [VersionNumber(r.id, r.number, VersionState(r.state)) for r in rows]


def version_number(conn: Connection, version_id: int) -> int | None:
    """The number of the version with this id."""
    return conn.execute(select(versions.c.number).where(versions.c.id == version_id)
                        ).scalar_one_or_none()


def active_head(conn: Connection, model_id: int) -> VersionHead | None:
    """The head of the model's active version (None: no active version)."""
    row = conn.execute(select(versions.c.id, versions.c.number, versions.c.fit_start,
                              versions.c.fit_end, versions.c.active_from, versions.c.diagnostics)
                       .where(versions.c.model_id == model_id,
                              versions.c.state == VersionState.ACTIVE.value)).first()
    if row is None:
        return None
    diagnostics = row.diagnostics or {}
    calibration = diagnostics.get("calibration") or {}
    return VersionHead(row.id, row.number, row.fit_start, row.fit_end, row.active_from,
                       diagnostics.get("days"), calibration.get("h"), calibration.get("h_known"))


def last_status(conn: Connection, model_id: int) -> LastStatus | None:
    """The status of the model's latest check (None: never checked)."""
    row = conn.execute(select(day_checks.c.day, day_checks.c.status, day_checks.c.status_since,
                              day_checks.c.reasons, day_checks.c.version_id)
                       .where(day_checks.c.model_id == model_id)
                       .order_by(day_checks.c.day.desc()).limit(1)).first()
    if row is None:
        return None
    return LastStatus(row.day, Status(row.status), row.status_since, tuple(row.reasons),
                      row.version_id)
