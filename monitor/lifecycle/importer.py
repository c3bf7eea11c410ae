"""``model import``: a model fitted elsewhere, from a TOML or JSON description.

Required: ``response``, ``predictors``, ``time_column``, ``coefficients`` (a table keyed by
``intercept`` and each predictor), ``s`` and ``dof``. Optional: ``id_column``, ``level``,
``covariance`` (rows and columns in the order intercept, predictors…), ``n``, ``fit_start``,
``fit_end``, ``active_from``, ``tau2`` and ``sigma_w2`` (day effects), ``dispersion``,
``ranges`` (the fitted predictor ranges, ``{column = [low, high]}``) and ``note``. README,
"The model import file", documents each key with its unit (``tests/test_fit_import.py``
imports the example there and checks that every key is described).

An imported version has no fit window in the database: its bias chart limit takes the imported
values as exact, and it gets no slope test or within-day slope chart (both need the fit
window's day statistics); the import says so.
"""

from __future__ import annotations

import json
import tomllib
from dataclasses import dataclass, replace
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.days import local_day
from monitor.domain.model import ModelRecord, ModelSpec
from monitor.domain.version import (
    Baseline,
    Line,
    Version,
    VersionDraft,
    VersionSource,
    VersionState,
)
from monitor.errors import DegenerateDataError, InputError
from monitor.lifecycle.fit import actor_name, same_columns
from monitor.monitoring.context import imported_design
from monitor.stats.calibration import calibrate_h
from monitor.stats.ols import INTERCEPT
from monitor.stats.prediction import PredictionModel
from monitor.store import audit
from monitor.store.access import database
from monitor.store.engine import write_transaction
from monitor.store.models import create_model, find_model
from monitor.store.versions import active_version, insert_version

# Said of every imported version (model import, model show): what it cannot do, and the way out.
NO_SLOPE_TEST = (
    "no slope test and no within-day slope chart: both compare recent days with the fit "
    "window's rows day by day (each day's count, means and spread), which a description of the "
    "line does not carry; the bias chart, the coverage test and the spread test run as usual. "
    "To have them, fit a version here from stored rows ('fitwatch refit {name} --start DAY', "
    "or 'fitwatch model fit {name} --data FILE') and promote it")
FORMAT_DOC = "the README's section 'The model import file' explains each key"
REQUIRED = ("response", "predictors", "time_column", "coefficients", "s", "dof")
OPTIONAL = ("id_column", "level", "covariance", "n", "fit_start", "fit_end", "active_from",
            "tau2", "sigma_w2", "dispersion", "ranges", "note")


@dataclass(frozen=True, eq=False)
class ImportReport:
    model: ModelRecord
    version: Version
    warnings: tuple[str, ...]

    def sentence(self) -> str:
        v, name = self.version, self.model.name
        source = f" from {v.draft.imported_from}" if v.draft.imported_from else ""
        if v.state == VersionState.ACTIVE:
            state = f"active: it scores days from {v.active_from}"
        else:
            state = (f"a candidate: 'fitwatch promote {name} {v.number}' makes it the active "
                     "version")
        return f"{name}: version {v.number} imported{source} ({state})"


def read_description(path: Path) -> dict[str, Any]:
    if not path.is_file():
        raise InputError(f"{path} does not exist or is not a file")
    try:
        raw = path.read_bytes()
        if path.suffix.lower() == ".json":
            data = json.loads(raw.decode("utf-8"))
        else:
            data = tomllib.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError, tomllib.TOMLDecodeError) as exc:
        kind = "JSON" if path.suffix.lower() == ".json" else "TOML"
        raise InputError(f"{path} is not valid {kind}: {exc}") from exc
    if not isinstance(data, dict):
        raise InputError(f"{path}: expected a table of keys at the top level")
    unknown = sorted(set(data) - set(REQUIRED) - set(OPTIONAL))
    if unknown:
        raise InputError(f"{path}: unknown key '{unknown[0]}'; allowed: "
                         + ", ".join(REQUIRED + OPTIONAL) + f" ({FORMAT_DOC})")
    missing = [k for k in REQUIRED if k not in data]
    if missing:
        raise InputError(f"{path}: missing key(s) " + ", ".join(f"'{m}'" for m in missing)
                         + f" ({FORMAT_DOC})")
    return data


def _number(data: dict[str, Any], key: str, path: Path, default: Any = None) -> Any:
    value = data.get(key, default)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float) or not np.isfinite(value):
        raise InputError(f"{path}: '{key}' must be a finite number; got {value!r}")
    return value


def _day(data: dict[str, Any], key: str, path: Path) -> date | None:
    value = data.get(key)
    if value is None or isinstance(value, date):
        return value
    try:
        return date.fromisoformat(str(value))
    except ValueError as exc:
        raise InputError(f"{path}: '{key}' must be a date (YYYY-MM-DD); got {value!r}") from exc


def import_model(settings: Settings, name: str, path: Path, *, now: datetime | None = None,
                 actor: str | None = None, engine: Engine | None = None) -> ImportReport:
    now = now or datetime.now(UTC)
    actor = actor or actor_name()
    data = read_description(path)
    predictors = data["predictors"]
    if not (isinstance(predictors, list) and predictors
            and all(isinstance(p, str) for p in predictors)):
        raise InputError(f"{path}: 'predictors' must be a non-empty list of column names")
    terms = (INTERCEPT, *predictors)
    coefs = data["coefficients"]
    if not isinstance(coefs, dict) or set(coefs) != set(terms):
        raise InputError(f"{path}: 'coefficients' must have exactly the keys "
                         + ", ".join(terms))
    coef = np.array([_number(coefs, t, path) for t in terms], dtype=np.float64)
    s, dof = _number(data, "s", path), _number(data, "dof", path)
    if not isinstance(dof, int):
        raise InputError(f"{path}: 'dof' must be an integer")
    cov = data.get("covariance")
    cov_arr = None if cov is None else np.asarray(cov, dtype=np.float64)
    ranges = data.get("ranges") or {}
    x_min = x_max = None
    if ranges:
        if set(ranges) != set(predictors):
            raise InputError(f"{path}: 'ranges' must give [low, high] for each predictor")
        x_min = np.array([float(ranges[p][0]) for p in predictors])
        x_max = np.array([float(ranges[p][1]) for p in predictors])
    try:
        model_check = PredictionModel.from_covariance(terms, coef, float(s), int(dof), cov_arr,
                                                      x_min, x_max)
    except DegenerateDataError as exc:
        raise InputError(f"{path}: {exc}") from exc
    level = _number(data, "level", path, settings.for_model(name).check.level)
    tau2, sigma_w2 = _number(data, "tau2", path), _number(data, "sigma_w2", path)
    notes = []
    if cov_arr is None:
        notes.append("no covariance matrix: prediction intervals omit the leverage term and are "
                     "slightly too narrow away from the fitted centre")
    if tau2 is None:
        notes.append("no day-effect variances (tau2, sigma_w2): days are assumed independent")
    notes.append(NO_SLOPE_TEST.format(name=name))
    fit_start, fit_end = _day(data, "fit_start", path), _day(data, "fit_end", path)
    cs = settings.for_model(name).check
    line = Line(terms=terms, coefficients=coef, s=float(s), dof=int(dof), level=float(level),
                n=model_check.n or _number(data, "n", path), covariance=cov_arr,
                std_errors=None if cov_arr is None else np.sqrt(np.diag(cov_arr)),
                xmean=model_check.xmean, slope_inverse=model_check.slope_inverse, x_min=x_min,
                x_max=x_max)
    baseline = Baseline(tau2=tau2, sigma_w2=sigma_w2,
                        dispersion=_number(data, "dispersion", path, 1.0))
    draft = VersionDraft(source=VersionSource.IMPORT, line=line, baseline=baseline,
                         fit_start=fit_start, fit_end=fit_end, note=data.get("note"),
                         notes=tuple(notes), imported_from=str(path))
    calibration = calibrate_h(imported_design(draft), k=cs.cusum_k,
                              target_arl=cs.cusum_arl_days, guarantee=cs.guarantee)
    draft = replace(draft, baseline=baseline.calibrated(calibration))
    with (database(settings, engine, sections="warn", creating=name) as db,
          write_transaction(db) as conn):
        model = find_model(conn, name)
        spec = ModelSpec(name, data["response"], tuple(predictors), data["time_column"],
                         data.get("id_column"))
        if model is None:
            model = create_model(conn, spec, now)
        else:
            same_columns(model, spec.response, spec.predictors, spec.time_column,
                         spec.id_column)
        current = active_version(conn, model.id)
        active_from = None
        if current is None:
            active_from = (_day(data, "active_from", path)
                           or (fit_end + timedelta(days=1) if fit_end else None)
                           or local_day(now, settings.timezone))
        state = VersionState.ACTIVE if current is None else VersionState.CANDIDATE
        version = insert_version(conn, model.id, draft, state=state, active_from=active_from,
                                 now=now, actor=actor)
        audit.record(conn, action="import", actor=actor, at=now, model_id=model.id,
                     version_id=version.id, effective_day=active_from,
                     details={"version": version.number, "file": str(path), "notes": notes})
    return ImportReport(model, version, tuple(notes))
