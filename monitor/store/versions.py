"""Stored versions: a :class:`~monitor.domain.version.Version` to a ``versions`` row and back.

Where a version's columns meet the domain types: :func:`_values` writes a draft, :func:`_version`
reads a row. Scalars the nights filter or show have columns; the rest of the baseline (day
effects, the chart's calibration) lives in the ``diagnostics`` JSON document, written and read
with :mod:`monitor.domain.codec`; its reading,
:func:`~monitor.store.version_sheets.baseline_parts`, is shared with the views' sheets, which
read the other columns without building the arrays.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import replace
from datetime import date, datetime
from typing import Any

import numpy as np
from sqlalchemy import Connection, func, insert, select, update

from monitor.domain.codec import decode, encode
from monitor.domain.version import (
    Baseline,
    Line,
    SlopeLimits,
    Version,
    VersionDraft,
    VersionSource,
    VersionState,
)
from monitor.errors import NotFoundError
from monitor.stats.moments import DayMoments
from monitor.store.engine import id_chunks
from monitor.store.schema import inserted_id, versions
from monitor.store.version_sheets import baseline_parts, missing_version

_ARRAYS = ("coefficients", "std_errors", "covariance", "xmean", "slope_inverse", "x_min", "x_max")


def _values(draft: VersionDraft) -> dict[str, Any]:
    """The columns of a version's fit and baseline."""
    line, base = draft.line, draft.baseline
    diagnostics = {
        "day_effects": encode(base.day_effects), "calibration": encode(base.calibration),
        "days": base.fit_days, "tvalues": encode(line.tvalues), "pvalues": encode(line.pvalues),
        "import_notes": list(draft.notes), "imported_from": draft.imported_from,
        "window": encode(base.diagnosis), "slope_limits": encode(base.slope_limits),
    }
    return {
        "source": draft.source.value, "fit_start": draft.fit_start, "fit_end": draft.fit_end,
        "level": line.level, "n": line.n, "dof": line.dof, "s": line.s,
        "r_squared": encode(line.r_squared), "adj_r_squared": encode(line.adj_r_squared),
        "condition_number": encode(line.condition_number), "terms": list(line.terms),
        **{name: encode(getattr(line, name)) for name in _ARRAYS},
        "tau2": base.tau2, "sigma_w2": base.sigma_w2, "dispersion": base.dispersion,
        "cusum_k": base.calibration.k if base.calibration else None,
        "cusum_h": base.calibration.h if base.calibration else None,
        "reference": encode(base.reference),
        "diagnostics": {k: v for k, v in diagnostics.items() if v is not None},
        "note": draft.note,
    }


def _version(row: Any) -> Version:
    m = row._mapping
    diag = dict(m["diagnostics"] or {})
    arrays = {name: decode(np.ndarray, m[name]) for name in _ARRAYS}
    line = Line(
        terms=tuple(m["terms"]), level=m["level"], n=m["n"], dof=m["dof"], s=m["s"],
        r_squared=m["r_squared"], adj_r_squared=m["adj_r_squared"],
        condition_number=m["condition_number"],
        tvalues=decode(tuple[float, ...] | None, diag.get("tvalues")),
        pvalues=decode(tuple[float, ...] | None, diag.get("pvalues")), **arrays)
    baseline = Baseline(
        tau2=m["tau2"], sigma_w2=m["sigma_w2"], dispersion=m["dispersion"],
        reference=DayMoments.from_dict(m["reference"]) if m["reference"] else None,
        **baseline_parts(diag))
    draft = VersionDraft(
        source=VersionSource(m["source"]), line=line, baseline=baseline,
        fit_start=m["fit_start"], fit_end=m["fit_end"], note=m["note"],
        notes=tuple(diag.get("import_notes") or ()), imported_from=diag.get("imported_from"))
    return Version(id=m["id"], model_id=m["model_id"], number=m["number"],
                   state=VersionState(m["state"]), draft=draft, active_from=m["active_from"],
                   active_until=m["active_until"], created_at=m["created_at"],
                   created_by=m["created_by"])


def insert_version(conn: Connection, model_id: int, draft: VersionDraft, *,
                   state: VersionState, active_from: date | None, now: datetime,
                   actor: str) -> Version:
    number = (conn.execute(select(func.max(versions.c.number))
                           .where(versions.c.model_id == model_id)).scalar() or 0) + 1
    new_id = inserted_id(conn.execute(insert(versions).values(
        model_id=model_id, number=number, state=state.value, active_from=active_from,
        active_until=None, created_at=now, created_by=actor, **_values(draft),
    )))
    return Version(id=new_id, model_id=model_id, number=number, state=state, draft=draft,
                   active_from=active_from, active_until=None, created_at=now,
                   created_by=actor)


def store_slope_limits(conn: Connection, version_id: int, limits: SlopeLimits) -> None:
    """Keep slope-chart limits solved for the settings now in force with the version (they
    are derived from its fit window and the settings alone; nothing of the fit changes)."""
    row = conn.execute(select(versions.c.diagnostics)
                       .where(versions.c.id == version_id)).first()
    if row is None:
        return
    diagnostics = dict(row.diagnostics or {})
    diagnostics["slope_limits"] = encode(limits)
    conn.execute(update(versions).where(versions.c.id == version_id)
                 .values(diagnostics=diagnostics))


def get_version(conn: Connection, model_id: int, number: int, *,
                model_name: str = "") -> Version:
    row = conn.execute(select(versions).where(versions.c.model_id == model_id,
                                              versions.c.number == number)).first()
    if row is None:
        raise missing_version(conn, model_id, number, model_name)
    return _version(row)


def version_by_id(conn: Connection, version_id: int) -> Version:
    """The version stored under ``version_id`` (a day check names the version that scored it)."""
    row = conn.execute(select(versions).where(versions.c.id == version_id)).first()
    if row is None:
        raise NotFoundError(f"no version with id {version_id}")
    return _version(row)


def list_versions(conn: Connection, model_id: int) -> list[Version]:
    rows = conn.execute(select(versions).where(versions.c.model_id == model_id)
                        .order_by(versions.c.number))
    return [_version(r) for r in rows]


def versions_by_id(conn: Connection, ids: Iterable[int]) -> dict[int, Version]:
    """The stored versions with these ids, by id (ids no longer stored are left out)."""
    out: dict[int, Version] = {}
    for chunk in id_chunks(ids):
        rows = conn.execute(select(versions).where(versions.c.id.in_(chunk)))
        out.update((r.id, _version(r)) for r in rows)
    return out


def candidates_by_model(conn: Connection, model_ids: Iterable[int]) -> dict[int, list[int]]:
    """Each model's candidate version numbers, oldest first (models without any left out)."""
    out: dict[int, list[int]] = {}
    for chunk in id_chunks(model_ids):
        rows = conn.execute(select(versions.c.model_id, versions.c.number).where(
            versions.c.model_id.in_(chunk),
            versions.c.state == VersionState.CANDIDATE.value).order_by(versions.c.number))
        for model_id, number in rows:
            out.setdefault(model_id, []).append(number)
    return out


def active_version(conn: Connection, model_id: int) -> Version | None:
    row = conn.execute(select(versions).where(versions.c.model_id == model_id,
                                              versions.c.state == VersionState.ACTIVE.value)
                       ).first()
    return _version(row) if row is not None else None


def scoring_versions(conn: Connection, model_id: int) -> list[Version]:
    """Versions that score (or scored) some days, in the order they took over."""
    rows = conn.execute(select(versions).where(versions.c.model_id == model_id,
                                               versions.c.active_from.is_not(None))
                        .order_by(versions.c.active_from, versions.c.number))
    return [_version(r) for r in rows]


def set_state(conn: Connection, version: Version, *, state: VersionState,
              active_from: date | None = None, active_until: date | None = None) -> Version:
    conn.execute(update(versions).where(versions.c.id == version.id)
                 .values(state=state.value, active_from=active_from, active_until=active_until))
    return replace(version, state=state, active_from=active_from, active_until=active_until)
