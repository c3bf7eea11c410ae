"""Fitted versions of a model: storing, loading, and which one scores a given day."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, datetime
from types import SimpleNamespace
from typing import Any

import numpy as np
from sqlalchemy import Connection, func, insert, select, update

from monitor.errors import NotFoundError
from monitor.stats.moments import DayMoments
from monitor.stats.prediction import PredictionModel
from monitor.store.schema import jsonable, versions

ACTIVE, CANDIDATE, RETIRED = "active", "candidate", "retired"


@dataclass(frozen=True, eq=False)
class NewVersion:
    """Everything a fit (or an import) produces, ready to store."""

    source: str
    level: float
    terms: tuple[str, ...]
    coefficients: np.ndarray
    s: float
    dof: int
    n: int | None = None
    fit_start: date | None = None
    fit_end: date | None = None
    std_errors: np.ndarray | None = None
    covariance: np.ndarray | None = None
    xmean: np.ndarray | None = None
    slope_inverse: np.ndarray | None = None
    x_min: np.ndarray | None = None
    x_max: np.ndarray | None = None
    r_squared: float | None = None
    adj_r_squared: float | None = None
    condition_number: float | None = None
    tau2: float | None = None
    sigma_w2: float | None = None
    dispersion: float | None = None
    cusum_k: float | None = None
    cusum_h: float | None = None
    reference: DayMoments | None = None  # the fit window's day statistics, frozen
    diagnostics: dict[str, Any] = field(default_factory=dict)
    note: str | None = None


@dataclass(frozen=True, eq=False)
class VersionRecord:
    id: int
    model_id: int
    number: int
    state: str
    source: str
    fit_start: date | None
    fit_end: date | None
    active_from: date | None
    active_until: date | None
    level: float
    n: int | None
    dof: int
    s: float
    r_squared: float | None
    adj_r_squared: float | None
    condition_number: float | None
    terms: tuple[str, ...]
    coefficients: np.ndarray
    std_errors: np.ndarray | None
    covariance: np.ndarray | None
    xmean: np.ndarray | None
    slope_inverse: np.ndarray | None
    x_min: np.ndarray | None
    x_max: np.ndarray | None
    tau2: float | None
    sigma_w2: float | None
    dispersion: float | None
    cusum_k: float | None
    cusum_h: float | None
    reference: dict[str, Any] | None  # DayMoments.to_dict() of the fit window
    diagnostics: dict[str, Any]
    created_at: datetime
    created_by: str | None
    note: str | None

    @property
    def k(self) -> int:
        return len(self.terms) - 1

    def prediction_model(self) -> PredictionModel:
        k = self.k
        lo = self.x_min if self.x_min is not None else np.full(k, -np.inf)
        hi = self.x_max if self.x_max is not None else np.full(k, np.inf)
        if self.slope_inverse is not None and self.xmean is not None and self.n:
            return PredictionModel(self.terms, self.coefficients, self.s, self.dof, self.n,
                                   self.xmean, self.slope_inverse, lo, hi)
        return PredictionModel.from_covariance(self.terms, self.coefficients, self.s, self.dof,
                                               self.covariance, lo, hi)

    def scores_day(self, day: date) -> bool:
        if self.active_from is None or day < self.active_from:
            return False
        return self.active_until is None or day <= self.active_until

    def coefficient_map(self, values: np.ndarray | None = None) -> dict[str, float | None]:
        vals = self.coefficients if values is None else values
        return {t: (float(v) if np.isfinite(v) else None) for t, v in zip(self.terms, vals,
                                                                          strict=True)}


def _array(value: Any) -> np.ndarray | None:
    if value is None:
        return None
    return np.array([np.nan if v is None else v for v in np.ravel(np.array(value, dtype=object))],
                    dtype=np.float64).reshape(np.shape(value))


def _record(row: Any) -> VersionRecord:
    m = row._mapping
    return VersionRecord(
        id=m["id"], model_id=m["model_id"], number=m["number"], state=m["state"],
        source=m["source"], fit_start=m["fit_start"], fit_end=m["fit_end"],
        active_from=m["active_from"], active_until=m["active_until"], level=m["level"],
        n=m["n"], dof=m["dof"], s=m["s"], r_squared=m["r_squared"],
        adj_r_squared=m["adj_r_squared"], condition_number=m["condition_number"],
        terms=tuple(m["terms"]), coefficients=_array(m["coefficients"]),
        std_errors=_array(m["std_errors"]), covariance=_array(m["covariance"]),
        xmean=_array(m["xmean"]), slope_inverse=_array(m["slope_inverse"]),
        x_min=_array(m["x_min"]), x_max=_array(m["x_max"]), tau2=m["tau2"],
        sigma_w2=m["sigma_w2"], dispersion=m["dispersion"], cusum_k=m["cusum_k"],
        cusum_h=m["cusum_h"],
        reference=m["reference"],
        diagnostics=dict(m["diagnostics"] or {}), created_at=m["created_at"],
        created_by=m["created_by"], note=m["note"],
    )


def insert_version(conn: Connection, model_id: int, new: NewVersion, *, state: str,
                   active_from: date | None, now: datetime, actor: str) -> VersionRecord:
    number = (conn.execute(select(func.max(versions.c.number))
                           .where(versions.c.model_id == model_id)).scalar() or 0) + 1
    values = _values(new, model_id, number, state, active_from, now, actor)
    new_id = conn.execute(insert(versions).values(**values)).inserted_primary_key[0]
    return get_version(conn, model_id, number, _id=new_id)


def draft_record(new: NewVersion, *, model_id: int = 0, number: int = 1, state: str = ACTIVE,
                 active_from: date | None, now: datetime, actor: str) -> VersionRecord:
    """The record ``new`` would become once stored, without a database (for replay)."""
    values = {"id": number, **_values(new, model_id, number, state, active_from, now, actor)}
    return _record(SimpleNamespace(_mapping=values))


def _values(new: NewVersion, model_id: int, number: int, state: str, active_from: date | None,
            now: datetime, actor: str) -> dict[str, Any]:
    return {
        "model_id": model_id, "number": number, "state": state, "source": new.source,
        "fit_start": new.fit_start, "fit_end": new.fit_end, "active_from": active_from,
        "active_until": None, "level": new.level, "n": new.n, "dof": new.dof, "s": new.s,
        "r_squared": new.r_squared, "adj_r_squared": new.adj_r_squared,
        "condition_number": new.condition_number, "terms": list(new.terms),
        "coefficients": jsonable(new.coefficients), "std_errors": jsonable(new.std_errors),
        "covariance": jsonable(new.covariance), "xmean": jsonable(new.xmean),
        "slope_inverse": jsonable(new.slope_inverse), "x_min": jsonable(new.x_min),
        "x_max": jsonable(new.x_max), "tau2": new.tau2, "sigma_w2": new.sigma_w2,
        "dispersion": new.dispersion, "cusum_k": new.cusum_k, "cusum_h": new.cusum_h,
        "reference": new.reference.to_dict() if new.reference is not None else None,
        "diagnostics": jsonable(new.diagnostics), "created_at": now, "created_by": actor,
        "note": new.note,
    }


def get_version(conn: Connection, model_id: int, number: int, *, _id: int | None = None,
                model_name: str = "") -> VersionRecord:
    query = select(versions).where(versions.c.model_id == model_id)
    query = query.where(versions.c.id == _id) if _id else query.where(versions.c.number == number)
    row = conn.execute(query).first()
    if row is None:
        known = [v.number for v in list_versions(conn, model_id)]
        shown = ", ".join(map(str, known)) or "none"
        raise NotFoundError(f"model '{model_name}' has no version {number}; versions: {shown}")
    return _record(row)


def list_versions(conn: Connection, model_id: int) -> list[VersionRecord]:
    rows = conn.execute(select(versions).where(versions.c.model_id == model_id)
                        .order_by(versions.c.number))
    return [_record(r) for r in rows]


def active_version(conn: Connection, model_id: int) -> VersionRecord | None:
    row = conn.execute(select(versions).where(versions.c.model_id == model_id,
                                              versions.c.state == ACTIVE)).first()
    return _record(row) if row is not None else None


def scoring_versions(conn: Connection, model_id: int) -> list[VersionRecord]:
    """Versions that score (or scored) some days, in the order they took over."""
    rows = conn.execute(select(versions).where(versions.c.model_id == model_id,
                                               versions.c.active_from.is_not(None))
                        .order_by(versions.c.active_from, versions.c.number))
    return [_record(r) for r in rows]


def set_state(conn: Connection, version_id: int, *, state: str,
              active_from: date | None = None, active_until: date | None = None) -> None:
    conn.execute(update(versions).where(versions.c.id == version_id)
                 .values(state=state, active_from=active_from, active_until=active_until))


def set_cusum(conn: Connection, version: VersionRecord, calibration: Any) -> VersionRecord:
    """Store the CUSUM limit calibrated for a version (``calibration``: stats.Calibration)."""
    diagnostics = dict(version.diagnostics)
    diagnostics["calibration"] = calibration_summary(calibration)
    conn.execute(update(versions).where(versions.c.id == version.id)
                 .values(cusum_k=calibration.k, cusum_h=calibration.h,
                         diagnostics=jsonable(diagnostics)))
    return get_version(conn, version.model_id, version.number)


def calibration_summary(c: Any) -> dict[str, Any]:
    """The stored form of a ``stats.calibration.Calibration`` (without the bootstrap draws)."""
    return {"k": c.k, "target_arl": c.target_arl, "guarantee": c.guarantee, "h": c.h,
            "h_known": c.h_known, "arl_known": c.arl_known, "draws": c.draws, "seed": c.seed,
            "calibrated": c.calibrated, "reason": c.reason}
