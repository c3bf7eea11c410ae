"""Fitting a version of a model: the fit, its day effects, its dispersion and its CUSUM limit.

``model fit`` stores a file's rows exactly as ``ingest`` does, then fits on the stored rows of
the window. The first version of a model becomes active from the day after its window; later
versions are candidates until promoted.
"""

from __future__ import annotations

import getpass
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
from sqlalchemy import Engine

from monitor.config import CheckSettings, Settings
from monitor.domain.days import as_date
from monitor.domain.model import ModelRecord, ModelSpec, check_model_section
from monitor.domain.version import (
    Baseline,
    ChartCalibration,
    Line,
    SlopeLimits,
    Version,
    VersionDraft,
    VersionSource,
    VersionState,
)
from monitor.errors import DegenerateDataError, InputError, StateError
from monitor.ingest.service import IngestSummary, ingest_file, options_for
from monitor.monitoring.context import slope_chart_of, slope_limits_of
from monitor.stats.calibration import Calibration, calibrate_chart, chart_design
from monitor.stats.coverage import miss_dispersion
from monitor.stats.day_effects import day_effects_of_fit
from monitor.stats.diagnosis import diagnose
from monitor.stats.moments import DayMoments
from monitor.stats.ols import OLSFit, fit_ols
from monitor.stats.prediction import PredictionModel
from monitor.stats.window_summary import SLOPE_ROW_RULE, DayEffects, FitDiagnosis
from monitor.store import audit
from monitor.store.access import database
from monitor.store.engine import write_transaction
from monitor.store.models import create_model, delete_model, find_model
from monitor.store.observations import load_observations
from monitor.store.retention import kept_from
from monitor.store.row_days import days_with_rows
from monitor.store.versions import active_version, insert_version


@dataclass(frozen=True, eq=False)
class FittedVersion:
    """A fit with everything the nightly check needs, before it is stored."""

    fit: OLSFit
    effects: DayEffects
    dispersion: float
    calibration: Calibration
    days: DayMoments
    first_day: date
    last_day: date
    diagnosis: FitDiagnosis | None = None
    slope_limits: SlopeLimits | None = None

    def draft(self, level: float) -> VersionDraft:
        """The version this fit makes, ready to store."""
        f, e = self.fit, self.effects
        line = Line(
            terms=f.terms, coefficients=np.array(f.coef), s=f.s, dof=f.dof, level=level,
            n=f.n, std_errors=f.std_errors, covariance=f.cov, xmean=np.array(f.xmean),
            slope_inverse=np.array(f.slope_inverse), x_min=np.array(f.x_min),
            x_max=np.array(f.x_max), r_squared=f.r_squared, adj_r_squared=f.adj_r_squared,
            condition_number=f.condition_number, tvalues=tuple(map(float, f.tvalues)),
            pvalues=tuple(map(float, f.pvalues)))
        baseline = Baseline(tau2=e.tau2, sigma_w2=e.sigma_w2, dispersion=self.dispersion,
                            day_effects=e, reference=self.days,
                            calibration=ChartCalibration.of(self.calibration),
                            fit_days=len(self.days), diagnosis=self.diagnosis,
                            slope_limits=self.slope_limits)
        return VersionDraft(source=VersionSource.FIT, line=line, baseline=baseline,
                            fit_start=self.first_day, fit_end=self.last_day)


def fit_window(x: np.ndarray, y: np.ndarray, days: np.ndarray, names: tuple[str, ...],
               level: float, settings: CheckSettings) -> FittedVersion:
    """Fit on rows ``(x, y)`` stamped with ``days`` and derive what the check needs."""
    fit = fit_ols(x, y, names)
    table = DayMoments.from_rows(days, np.column_stack([x, y]))
    present = int((np.asarray(table.n) > 0).sum())
    if present < settings.min_fit_days:
        raise DegenerateDataError(
            f"the fit window holds observations on {present} day(s); at least "
            f"{settings.min_fit_days} are needed (setting check.min_fit_days), so that day-to-day "
            "variation can be measured")
    if int(np.asarray(table.n).sum()) <= present:
        raise DegenerateDataError(
            f"the fit window holds one observation per day ({present} days); some days need "
            "two or more, so that day-to-day and within-day variation can be told apart")
    effects = day_effects_of_fit(table, fit.coef)
    scores = PredictionModel.from_fit(fit).score(x, y, level)
    misses = DayMoments.from_rows(days, (~scores.inside).astype(np.float64)[:, None])
    dispersion = miss_dispersion(misses.n, misses.mean[:, 0] * misses.n)
    diagnosis = diagnose_window(fit, table, days, x, y, effects, float(scores.inside.mean()))
    design = chart_design(fit, table, effects, diagnosis)
    calibration = calibrate_chart(design, settings.cusum_k, settings.cusum_arl_days,
                                  settings.guarantee, settings.learn_until_days)
    limits = slope_limits_of(slope_chart_of(table, diagnosis, settings), settings)
    first = as_date(table.days[0])
    last = as_date(table.days[-1])
    return FittedVersion(fit, effects, dispersion, calibration, table, first, last, diagnosis,
                         limits)


def diagnose_window(fit: OLSFit, table: DayMoments, days: np.ndarray, x: np.ndarray,
                    y: np.ndarray, effects: DayEffects, covered: float, *,
                    slope_row_rule: str = SLOPE_ROW_RULE) -> FitDiagnosis:
    """The fit window's departures from the textbook model (:mod:`monitor.stats.diagnosis`);
    ``slope_row_rule`` other than today's only to compare the rules (benchmarks)."""
    day_index = np.searchsorted(np.asarray(table.days, dtype="datetime64[D]"),
                                np.asarray(days, dtype="datetime64[D]"))
    weekdays = [as_date(d).weekday() for d in table.days]
    resid = y - fit.coef[0] - x @ fit.coef[1:]
    return diagnose(resid, day_index, weekdays, x, effects.tau2, effects.sigma_w2, covered,
                    slope_row_rule=slope_row_rule)


@dataclass(frozen=True)
class FitRequest:
    name: str
    data: Path | None = None
    response: str | None = None
    predictors: tuple[str, ...] = ()
    time_column: str | None = None
    id_column: str | None = None
    start: date | None = None
    end: date | None = None
    level: float | None = None


@dataclass(frozen=True, eq=False)
class FitReport:
    model: ModelRecord
    version: Version
    fitted: FittedVersion
    ingest: IngestSummary | None


def fit_model(settings: Settings, request: FitRequest, *, now: datetime | None = None,
              actor: str | None = None, progress: bool = False,
              engine: Engine | None = None) -> FitReport:
    """``model fit``: create the model if new, store the file's rows, fit, store the version."""
    with database(settings, engine, sections="warn", creating=request.name) as db:
        return _fit_model(db, settings, request, now or datetime.now(UTC),
                          actor or actor_name(), progress)


def _fit_model(engine: Engine, settings: Settings, request: FitRequest, now: datetime,
               actor: str, progress: bool) -> FitReport:
    with write_transaction(engine) as conn:
        model = find_model(conn, request.name)
        created = model is None
        if model is None:
            model = create_model(conn, _spec(request), now)
        else:
            same_columns(model, request.response, request.predictors, request.time_column,
                         request.id_column)
    try:
        return _fit_created(engine, settings, request, model, now, actor, progress)
    except BaseException:
        if created:  # all or nothing: a model this fit created goes again with its rows
            with write_transaction(engine) as conn:
                delete_model(conn, model)
        raise


def _fit_created(engine: Engine, settings: Settings, request: FitRequest, model: ModelRecord,
                 now: datetime, actor: str, progress: bool) -> FitReport:
    check_model_section(settings, model)
    model_settings = settings.for_model(request.name)
    summary = None
    if request.data is not None:
        options = options_for(settings, request.name, strict=False, progress=progress, now=now)
        summary = ingest_file(engine, model, request.data, options)
        if summary.rejected_whole:
            raise InputError(f"model '{model.name}': every row of {request.data} was rejected, "
                             f"so nothing of it can be fitted on — {summary.why()}; fix the "
                             "file and fit again")
    level = request.level or model_settings.check.level
    with engine.connect() as conn:
        stored_days = days_with_rows(conn, model)
        if not stored_days:
            raise StateError(f"model '{model.name}' has no stored observations to fit on; "
                             "give --data FILE")
        kept = kept_from(conn, model.id)
        start = request.start or max(stored_days[0], kept or stored_days[0])
        end = request.end or stored_days[-1]
        if start > end:
            raise InputError(f"--start {start} lies after --end {end}")
        if kept is not None and start < kept:
            raise StateError(
                f"the rows of '{model.name}' before {kept.isoformat()} were pruned by retention, "
                f"and the fit window starts on {start.isoformat()}: a fit needs the rows of its "
                "whole window (the line alone would follow from the day statistics, but the "
                "window's diagnosis, spread reference and miss dispersion come from the rows); "
                f"fit from --start {kept.isoformat()} or later")
        obs = load_observations(conn, model, start, end)
    if len(obs.y) == 0:
        raise StateError(f"model '{model.name}' has no observations between {start} and {end}")
    fitted = fit_window(obs.x, obs.y, obs.days, model.predictors, level, model_settings.check)
    new = fitted.draft(level)
    with write_transaction(engine) as conn:
        current = active_version(conn, model.id)
        state = VersionState.ACTIVE if current is None else VersionState.CANDIDATE
        active_from = fitted.last_day + timedelta(days=1) if current is None else None
        version = insert_version(conn, model.id, new, state=state, active_from=active_from,
                                 now=now, actor=actor)
        audit.record(conn, action="fit", actor=actor, at=now, model_id=model.id,
                     version_id=version.id, effective_day=active_from,
                     details={"version": version.number, "state": state,
                              "window": [fitted.first_day.isoformat(),
                                         fitted.last_day.isoformat()]})
    return FitReport(model, version, fitted, summary)


def _spec(request: FitRequest) -> ModelSpec:
    missing = [flag for flag, value in (("--y", request.response), ("--x", request.predictors),
                                        ("--time", request.time_column)) if not value]
    if missing:
        raise InputError(f"model '{request.name}' does not exist yet; to create it give "
                         + ", ".join(missing))
    assert request.response and request.time_column
    return ModelSpec(request.name, request.response, tuple(request.predictors),
                     request.time_column, request.id_column)


def same_columns(model: ModelRecord, response: str | None, predictors: tuple[str, ...],
                 time_column: str | None, id_column: str | None) -> None:
    """Refuse a request that names other columns than the stored model has."""
    given = {"--y": (response, model.response),
             "--x": (tuple(predictors) or None, model.predictors),
             "--time": (time_column, model.time_column),
             "--id": (id_column, model.id_column)}
    for flag, (wanted, stored) in given.items():
        if wanted is not None and wanted != stored:
            raise StateError(f"model '{model.name}' already exists with {flag} {stored!r}; "
                             f"got {wanted!r} (a model's columns cannot change; use a new name)")


def actor_name() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return "unknown"
