"""Versions as the views show them, read from their columns without building the arrays.

``model show`` prints one version: its line's figures, its days, its charts' limits and what
its fit window showed. :func:`version_sheet` reads that as a
:class:`~monitor.domain.version.VersionSheet` straight from the stored JSON, where
``monitor.store.versions`` would build the covariance, the centring and the fit window's day
statistics with numpy, and a check's whole state with the statistics modules; for a command
that answers at once, that import is most of its time. :func:`learned_so_far` likewise reads
only the learning part of the model's last check.

:func:`baseline_parts` decodes the baseline's stored parts for both readers, so a sheet and a
whole version read them alike.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from sqlalchemy import Connection, select

from monitor.domain.codec import decode
from monitor.domain.version import (
    BaselineFigures,
    ChartCalibration,
    LineFigures,
    SlopeLimits,
    VersionSheet,
    VersionSource,
)
from monitor.domain.version_state import VersionState
from monitor.errors import NotFoundError, StateError
from monitor.stats.window_summary import DayEffects, FitDiagnosis
from monitor.store.schema import day_checks, versions

if TYPE_CHECKING:
    from monitor.stats.self_start import Learning


def baseline_parts(diagnostics: Mapping[str, Any]) -> dict[str, Any]:
    """The baseline's parts kept in a version's ``diagnostics`` JSON, by their field names
    (those of :class:`~monitor.domain.version.BaselineFigures`)."""
    return {
        "day_effects": decode(DayEffects | None, diagnostics.get("day_effects")),
        "calibration": decode(ChartCalibration | None, diagnostics.get("calibration")),
        "fit_days": diagnostics.get("days"),
        "diagnosis": decode(FitDiagnosis | None, diagnostics.get("window")),
        "slope_limits": decode(SlopeLimits | None, diagnostics.get("slope_limits")),
    }


def _figures(values: list[float | None] | None) -> tuple[float | None, ...] | None:
    return None if values is None else tuple(values)


def _sheet(row: Any) -> VersionSheet:
    m = row._mapping
    diagnostics = m["diagnostics"] or {}
    line = LineFigures(
        terms=tuple(m["terms"]), coefficients=tuple(m["coefficients"]), s=m["s"],
        dof=m["dof"], level=m["level"], n=m["n"], std_errors=_figures(m["std_errors"]),
        x_min=_figures(m["x_min"]), x_max=_figures(m["x_max"]), r_squared=m["r_squared"],
        adj_r_squared=m["adj_r_squared"], condition_number=m["condition_number"])
    return VersionSheet(
        id=m["id"], number=m["number"], state=VersionState(m["state"]),
        source=VersionSource(m["source"]), line=line, fit_start=m["fit_start"],
        fit_end=m["fit_end"], active_from=m["active_from"], active_until=m["active_until"],
        note=m["note"], notes=tuple(diagnostics.get("import_notes") or ()),
        created_at=m["created_at"], created_by=m["created_by"],
        baseline=BaselineFigures(tau2=m["tau2"], sigma_w2=m["sigma_w2"],
                                 dispersion=m["dispersion"], **baseline_parts(diagnostics)))


def version_sheet(conn: Connection, model_id: int, number: int | None = None, *,
                  model_name: str = "") -> VersionSheet:
    """Version ``number`` of the model; without a number its active version, or its latest
    when none is active."""
    query = select(versions).where(versions.c.model_id == model_id)
    if number is not None:
        row = conn.execute(query.where(versions.c.number == number)).first()
    else:
        row = (conn.execute(query.where(versions.c.state == VersionState.ACTIVE.value)).first()
               or conn.execute(query.order_by(versions.c.number.desc()).limit(1)).first())
    if row is not None:
        return _sheet(row)
    if number is None:
        raise StateError(f"model '{model_name}' has no fitted version yet")
    raise missing_version(conn, model_id, number, model_name)


def missing_version(conn: Connection, model_id: int, number: int,
                    model_name: str) -> NotFoundError:
    """The error for a version number the model does not have, naming the ones it has."""
    known = conn.execute(select(versions.c.number).where(versions.c.model_id == model_id)
                         .order_by(versions.c.number)).scalars().all()
    shown = ", ".join(map(str, known)) or "none"
    return NotFoundError(f"model '{model_name}' has no version {number}; versions: {shown}")


@dataclass(frozen=True)
class LearnedSoFar:
    """What the views say of a self-starting version's learning, as its last check left it:
    the checked days its level learned from, the checked days its slope chart's reference
    learned from, the days held back before they are learned, and whether a refit stopped it."""

    level_days: int = 0
    stopped: bool = False
    slope_days: int = 0
    held_days: int = 0

    @classmethod
    def of(cls, learning: Learning) -> LearnedSoFar:
        return cls(learning.level.n, learning.stopped, learning.slope_days,
                   len(learning.slope_pending))


def learned_so_far(conn: Connection, model_id: int, version_id: int) -> LearnedSoFar | None:
    """The learning of the model's last check, when that check was scored by ``version_id``
    (None: the model was never checked, or its last check was scored by another version).
    Reads the ``learning`` part of the check's stored state (a :class:`Learning`, whose
    absent fields take their defaults) without decoding the rest."""
    row = conn.execute(select(day_checks.c.version_id, day_checks.c.state)
                       .where(day_checks.c.model_id == model_id)
                       .order_by(day_checks.c.day.desc()).limit(1)).first()
    if row is None or row.version_id != version_id:
        return None
    learning = (row.state or {}).get("learning") or {}
    return LearnedSoFar(level_days=int((learning.get("level") or {}).get("n", 0)),
                        stopped=bool(learning.get("stopped", False)),
                        slope_days=int(learning.get("slope_days", 0)),
                        held_days=len(learning.get("slope_pending") or ()))
