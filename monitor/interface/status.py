"""Read-only views: ``status``, ``model list`` and ``model show``."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from datetime import UTC, date, datetime, timedelta
from typing import Any

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.errors import StateError
from monitor.interface.output import fmt
from monitor.monitoring.check import local_today
from monitor.runtime.daemon import NightlyState, nightly_state
from monitor.store import lease
from monitor.store.access import database
from monitor.store.checks import DayCheck, last_check
from monitor.store.models import ModelRecord, get_model, list_models
from monitor.store.observations import days_with_rows, last_observed_at
from monitor.store.versions import VersionRecord, active_version, get_version, list_versions

QUIET_DAYS = 3  # checked days without rows before status asks whether data still arrive
SHARPEN_RATIO = 1.5  # a bias chart limit this far above the exact-parameter one is "wide"
OK = "ok"


@dataclass(frozen=True)
class ModelStatus:
    model: str
    status: str | None  # None: never checked
    since: date | None
    last_checked_day: date | None
    reasons: tuple[str, ...]
    active_version: int | None
    behind_days: int  # complete days not yet checked
    nightly: NightlyState | None = None  # None: no daemon has ever run on this database
    last_rows_day: date | None = None  # the latest day with stored rows
    sharpen: Sharpening | None = None  # refit a loosely pinned version on a longer window

    def quiet_days(self) -> int:
        """Checked days since the latest day with rows (a feed that stopped shows here)."""
        if self.last_checked_day is None or self.last_rows_day is None:
            return 0
        return max(0, (self.last_checked_day - self.last_rows_day).days)

    def as_dict(self) -> dict[str, Any]:
        return {"model": self.model, "status": self.status, "since": self.since,
                "last_checked_day": self.last_checked_day, "reasons": list(self.reasons),
                "active_version": self.active_version, "behind_days": self.behind_days,
                "last_rows_day": self.last_rows_day,
                "sharpen": self.sharpen.as_dict() if self.sharpen else None,
                "nightly": self.nightly.as_dict() if self.nightly else None}

    def sentence(self) -> str:
        if self.status is None:
            head = f"{self.model}: not checked yet"
            if self.active_version is None:
                return head + " (no active version; run 'fitwatch model fit')"
            return head + " (run 'fitwatch check')"
        head = (f"{self.model}: {self.status.upper()} since {self.since}, checked through "
                f"{self.last_checked_day} (version {self.active_version})")
        if self.behind_days > 0:
            head += f"; {self.behind_days} complete day(s) not checked yet"
        if self.quiet_days() >= QUIET_DAYS:
            head += (f"; no rows since {self.last_rows_day} ({self.quiet_days()} days): is the "
                     "data still arriving?")
        extra = [self.sharpen.sentence()] if self.sharpen else []
        return "\n".join([head, *(f"  - {r}" for r in [*self.reasons, *extra])])


def model_statuses(settings: Settings, names: Sequence[str] | None = None, *,
                   now: datetime | None = None, engine: Engine | None = None) -> list[ModelStatus]:
    now = now or datetime.now(UTC)
    yesterday = local_today(now, settings) - timedelta(days=1)
    out = []
    with database(settings, engine) as db, db.connect() as conn:
        models = [get_model(conn, n) for n in names] if names else list_models(conn)
        held = lease.read(conn)
        nightly = nightly_state(settings, held, now) if held else None
        for model in models:
            last = last_check(conn, model.id, model=model.name)
            active = active_version(conn, model.id)
            latest = last_observed_at(conn, model)
            rows_day = latest.astimezone(settings.timezone).date() if latest else None
            status = _status(model, last, active, yesterday)
            advice = None
            if active is not None and status.status == OK:
                since = (len(days_with_rows(conn, model, active.fit_start))
                         if active.fit_start else 0)
                advice = sharpen_advice(model.name, active, since)
            out.append(replace(status, nightly=nightly, last_rows_day=rows_day,
                               sharpen=advice))
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


def sharpen_advice(name: str, version: VersionRecord,
                   days_since_fit_start: int) -> Sharpening | None:
    """Say so when the version's bias chart is wide only for want of days, and days have come.

    A version fitted on a short window (typically right after a change) pins the line down
    loosely; the limit that keeps false alarms rare is then far above the one exact parameters
    would need. Once at least twice as many days with rows exist from the same start, a refit
    on them tightens the chart without changing the line much (``compare`` then recommends it).
    """
    calibration = version.diagnostics.get("calibration") or {}
    h_known, fit_days = calibration.get("h_known"), version.diagnostics.get("days")
    if (version.cusum_h is None or not h_known or not fit_days or version.fit_start is None
            or version.cusum_h < SHARPEN_RATIO * h_known
            or days_since_fit_start < 2 * fit_days):
        return None
    return Sharpening(name, version.number, int(fit_days), float(version.cusum_h),
                      float(h_known), days_since_fit_start, version.fit_start)


def _status(model: ModelRecord, last: DayCheck | None, active: VersionRecord | None,
            yesterday: date) -> ModelStatus:
    number = active.number if active else None
    if last is None:
        behind = 0
        if active is not None and active.active_from is not None:
            behind = max(0, (yesterday - active.active_from).days + 1)
        return ModelStatus(model.name, None, None, None, (), number, behind)
    return ModelStatus(model.name, last.status, last.status_since, last.day,
                       tuple(last.reasons), number, max(0, (yesterday - last.day).days))


@dataclass(frozen=True, eq=False)
class VersionView:
    model: ModelRecord
    version: VersionRecord

    def as_dict(self) -> dict[str, Any]:
        v, m = self.version, self.model
        diag = v.diagnostics
        return {
            "model": m.name, "version": v.number, "state": v.state, "source": v.source,
            "response": m.response, "predictors": list(m.predictors),
            "coefficients": v.coefficient_map(),
            "std_errors": v.coefficient_map(v.std_errors) if v.std_errors is not None else None,
            "s": v.s, "dof": v.dof, "r_squared": v.r_squared,
            "adj_r_squared": v.adj_r_squared, "n": v.n, "level": v.level,
            "condition_number": v.condition_number,
            "fit_window": [v.fit_start, v.fit_end], "active_from": v.active_from,
            "active_until": v.active_until,
            "ranges": None if v.x_min is None else {
                name: [float(lo), float(hi)]
                for name, lo, hi in zip(m.predictors, v.x_min, v.x_max, strict=True)},
            "day_effects": {"tau2": v.tau2, "sigma_w2": v.sigma_w2,
                            "present": diag.get("day_effects_present")},
            "dispersion": v.dispersion,
            "cusum": {"k": v.cusum_k, "h": v.cusum_h, **{
                key: diag.get("calibration", {}).get(key)
                for key in ("target_arl", "guarantee", "h_known", "arl_known", "calibrated")}},
            "created_at": v.created_at, "created_by": v.created_by, "note": v.note,
        }

    def text(self) -> str:
        d = self.as_dict()
        v = self.version
        lines = [f"{d['model']} version {v.number} ({v.state}, {v.source}d)"
                 if v.source == "import" else f"{d['model']} version {v.number} ({v.state})",
                 f"  {self.model.response} = " + " + ".join(
                     f"{fmt(val, 4)}" + ("" if term == "intercept" else f" × {term}")
                     for term, val in d["coefficients"].items())]
        if d["std_errors"]:
            lines.append("  standard errors: " + ", ".join(
                f"{t} {fmt(se, 3)}" for t, se in d["std_errors"].items()))
        lines.append(f"  s = {fmt(v.s, 4)} on {v.dof} degrees of freedom"
                     + (f", R² = {v.r_squared:.4f}" if v.r_squared is not None else "")
                     + (f", n = {v.n}" if v.n else ""))
        if v.fit_start:
            lines.append(f"  fit window {v.fit_start} .. {v.fit_end}")
        if v.active_from:
            until = f" through {v.active_until}" if v.active_until else ""
            lines.append(f"  scores days from {v.active_from}{until}")
        if v.tau2 is not None and v.sigma_w2 is not None:
            lines.append(f"  day-to-day sd {fmt(v.tau2 ** 0.5, 3)}, within-day sd "
                         f"{fmt(v.sigma_w2 ** 0.5, 3)}; miss dispersion {fmt(v.dispersion, 3)}")
        if v.cusum_h is not None:
            cal = d["cusum"]
            lines.append(f"  bias chart k = {fmt(v.cusum_k, 2)}, h = {fmt(v.cusum_h, 3)} "
                         f"(target {fmt(cal['target_arl'], 4)} days between false alarms, "
                         f"held with probability {fmt(cal['guarantee'], 2)})")
        return "\n".join(lines)


def show_version(settings: Settings, name: str, number: int | None = None, *,
                 engine: Engine | None = None) -> VersionView:
    with database(settings, engine) as db, db.connect() as conn:
        model = get_model(conn, name)
        if number is None:
            version = active_version(conn, model.id)
            if version is None:
                versions = list_versions(conn, model.id)
                if not versions:
                    raise StateError(f"model '{name}' has no fitted version yet")
                version = versions[-1]
        else:
            version = get_version(conn, model.id, number, model_name=name)
    return VersionView(model, version)


@dataclass(frozen=True)
class ModelLine:
    name: str
    formula: str
    active_version: int | None
    versions: int
    status: str | None
    last_checked_day: date | None

    def as_dict(self) -> dict[str, Any]:
        return {"model": self.name, "formula": self.formula,
                "active_version": self.active_version, "versions": self.versions,
                "status": self.status, "last_checked_day": self.last_checked_day}


def list_model_lines(settings: Settings, *, engine: Engine | None = None) -> list[ModelLine]:
    out = []
    with database(settings, engine) as db, db.connect() as conn:
        for model in list_models(conn):
            versions = list_versions(conn, model.id)
            active = next((v for v in versions if v.state == "active"), None)
            last = last_check(conn, model.id)
            out.append(ModelLine(model.name,
                                 f"{model.response} ~ {' + '.join(model.predictors)}",
                                 active.number if active else None, len(versions),
                                 last.status if last else None, last.day if last else None))
    return out
