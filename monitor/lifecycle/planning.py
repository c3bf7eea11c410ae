"""Planning from the version the monitor vouches for: planned values with prediction intervals,
and the active version written out in the ``model import`` format.

A planned job is a row of predictor values; its plan is the version's prediction
``b0 + xᵀb`` with the prediction interval for one new observation (the interval the nightly
check scores against), and a flag when a value lies outside the range the version was fitted
on. A row whose predictor is missing or not a number gets a reason instead of a plan; the
other rows are still planned.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.model import ModelRecord
from monitor.domain.version import Version
from monitor.errors import InputError, StateError
from monitor.lifecycle.toml_text import toml_text
from monitor.stats.ols import INTERCEPT
from monitor.store.access import database
from monitor.store.models import get_model
from monitor.store.versions import active_version, get_version

_WHOLE = r"[+-]?\d+"
_LEADING_ZERO = r"[+-]?0\d"
_EXACT_WHOLE = 2**53  # every whole number below this is exactly a float64 (IEEE 754)
PLAN_COLUMNS = ("planned", "lower", "upper", "extrapolated", "version", "reason")
READABLE = (".csv", ".parquet")
DESCRIPTION_FORMATS = (".toml", ".json")


@dataclass(frozen=True, eq=False)
class Plan:
    """Planned rows: the input columns, then ``PLAN_COLUMNS``."""

    model: ModelRecord
    version: Version
    level: float
    frame: pd.DataFrame

    @property
    def planned(self) -> int:
        return int(self.frame["reason"].isna().sum())

    def reasons(self) -> dict[str, int]:
        counts = self.frame["reason"].dropna().value_counts()
        return {str(k): int(v) for k, v in counts.items()}


def _version(settings: Settings, name: str, number: int | None,
             engine: Engine | None) -> tuple[ModelRecord, Version]:
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        model = get_model(conn, name)
        if number is not None:
            return model, get_version(conn, model.id, number, model_name=model.name)
        version = active_version(conn, model.id)
    if version is None:
        raise StateError(f"'{name}' has no active version to plan with; fit one with "
                         f"'fitwatch model fit {name} ...'")
    return model, version


def parse_at(items: list[str], predictors: tuple[str, ...]) -> pd.DataFrame:
    """``--at COL=VALUE`` pairs as a one-row frame of text values."""
    values: dict[str, str] = {}
    for item in items:
        column, sep, value = item.partition("=")
        if not sep or not column.strip():
            raise InputError(f"--at wants COLUMN=VALUE; got {item!r}")
        values[column.strip()] = value.strip()
    unknown = sorted(set(values) - set(predictors))
    if unknown:
        raise InputError(f"--at names {', '.join(unknown)}, which the model does not use; its "
                         f"predictors are {', '.join(predictors)}")
    return typed(pd.DataFrame([{p: values.get(p, "") for p in predictors}]))


def read_jobs(path: Path, predictors: tuple[str, ...]) -> pd.DataFrame:
    """A CSV or Parquet file of planned jobs, every column read as it is written."""
    if not path.is_file():
        raise InputError(f"{path} does not exist or is not a file")
    suffix = path.suffix.lower()
    if suffix not in READABLE:
        raise InputError(f"{path}: planned jobs are read from .csv or .parquet files")
    try:
        frame = (pd.read_parquet(path) if suffix == ".parquet"
                 else pd.read_csv(path, dtype=str, keep_default_na=False))
    except (ValueError, OSError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        raise InputError(f"{path} could not be read: {exc}") from exc
    missing = [p for p in predictors if p not in frame.columns]
    if missing:
        raise InputError(f"{path} has no column {', '.join(repr(m) for m in missing)}; it has "
                         f"{', '.join(map(str, frame.columns)) or 'no columns'}")
    clash = [c for c in PLAN_COLUMNS if c in frame.columns]
    if clash:
        raise InputError(f"{path} already has the column(s) {', '.join(clash)} that the plan "
                         "writes; rename them")
    return frame if suffix == ".parquet" else typed(frame)


def typed(text: pd.DataFrame) -> pd.DataFrame:
    """Columns read as text (a CSV file, ``--at``) as the numbers they hold, so that the plan
    writes them back as numbers: a column whose every filled cell is a finite number becomes
    numbers (whole numbers as integers, empty cells missing); any other column keeps its text
    exactly, so a value that cannot be planned ('abc') is written back as it was read. Whole
    numbers with a leading zero ('007') or from 2**53 on are identifiers rather than amounts
    and keep the column as text too."""
    out = text.copy()
    for column in text.columns:
        cells = text[column].astype("string").str.strip()
        filled = (cells.notna() & (cells != "")).to_numpy()
        if not filled.any():
            continue
        values = pd.to_numeric(cells.where(filled), errors="coerce").astype("Float64")
        numbers = values.to_numpy(dtype=np.float64, na_value=np.nan)
        if not np.isfinite(numbers[filled]).all():
            continue
        if cells[filled].str.match(_LEADING_ZERO).to_numpy(dtype=bool).any():
            continue
        if cells[filled].str.fullmatch(_WHOLE).to_numpy(dtype=bool).all():
            if (np.abs(numbers[filled]) >= _EXACT_WHOLE).any():
                continue
            out[column] = values.astype("Int64")
        else:
            out[column] = numbers
    return out


def plan(settings: Settings, name: str, jobs: pd.DataFrame | None = None, *,
         at: list[str] | None = None, version: int | None = None, level: float | None = None,
         engine: Engine | None = None) -> Plan:
    """Plan ``jobs`` (or the one job of ``at``) with the active (or given) version."""
    model, chosen = _version(settings, name, version, engine)
    if jobs is None:
        jobs = parse_at(at or [], model.predictors)
    level = level if level is not None else chosen.level
    x, reasons = _numbers(jobs, model.predictors)
    good = reasons.isna().to_numpy()
    prediction = chosen.prediction_model()
    out = jobs.copy()
    planned = np.full(len(out), np.nan)
    lower, upper = planned.copy(), planned.copy()
    extrapolated = np.zeros(len(out), dtype=bool)
    if good.any():
        xs = x[good]
        planned[good] = prediction.predict(xs)
        lower[good], upper[good] = prediction.interval(xs, level)
        extrapolated[good] = np.any((xs < prediction.x_min) | (xs > prediction.x_max), axis=1)
    out["planned"] = planned
    out["lower"] = lower
    out["upper"] = upper
    flags = pd.Series(extrapolated, index=out.index, dtype="boolean")
    flags[~good] = pd.NA
    out["extrapolated"] = flags
    out["version"] = chosen.number
    out["reason"] = reasons.to_numpy()
    return Plan(model, chosen, float(level), out)


def _numbers(jobs: pd.DataFrame, predictors: tuple[str, ...]) -> tuple[np.ndarray, pd.Series]:
    """The predictor values as floats, and per row the reason it cannot be planned (or NA)."""
    x = np.full((len(jobs), len(predictors)), np.nan)
    reasons: list[str | None] = [None] * len(jobs)
    for j, column in enumerate(predictors):
        raw = jobs[column]
        text = raw.astype("string").str.strip()
        values = pd.to_numeric(text, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        empty = (text.isna() | (text == "")).to_numpy()
        for i in np.flatnonzero(~np.isfinite(values)):
            if reasons[i] is None:
                reasons[int(i)] = (f"{column} is missing" if empty[i]
                                   else f"{column} is {str(raw.iloc[i])!r}, not a number")
        x[:, j] = values
    return x, pd.Series(reasons, index=jobs.index, dtype="object")


def write_plan(result: Plan, path: Path) -> None:
    """The planned rows to ``path``, CSV or Parquet by its extension."""
    suffix = path.suffix.lower()
    if suffix not in READABLE:
        raise InputError(f"--out {path}: write .csv or .parquet")
    try:
        if suffix == ".parquet":
            result.frame.to_parquet(path, index=False)
        else:
            result.frame.to_csv(path, index=False)
    except OSError as exc:
        raise InputError(f"{path} could not be written: {exc}") from exc


def export_description(settings: Settings, name: str, *, version: int | None = None,
                       engine: Engine | None = None) -> dict[str, Any]:
    """The version in the ``model import`` format (keys of :mod:`monitor.lifecycle.importer`),
    so that importing it under another name plans exactly as this one does."""
    model, chosen = _version(settings, name, version, engine)
    line, base = chosen.line, chosen.baseline
    doc: dict[str, Any] = {
        "response": model.response, "predictors": list(model.predictors),
        "time_column": model.time_column,
        "coefficients": {t: float(c) for t, c in zip(chosen.terms, line.coefficients,
                                                      strict=True)},
        "s": float(line.s), "dof": int(line.dof), "level": float(chosen.level),
        "note": f"exported from '{model.name}' version {chosen.number}",
    }
    if model.id_column:
        doc["id_column"] = model.id_column
    if line.covariance is not None:
        doc["covariance"] = [[float(v) for v in row] for row in np.asarray(line.covariance)]
    if line.n is not None:
        doc["n"] = int(line.n)
    if line.x_min is not None and line.x_max is not None:
        doc["ranges"] = {p: [float(lo), float(hi)] for p, lo, hi in
                         zip(model.predictors, line.x_min, line.x_max, strict=True)
                         if math.isfinite(lo) and math.isfinite(hi)}
    for key, value in (("fit_start", chosen.fit_start), ("fit_end", chosen.fit_end)):
        if value is not None:
            doc[key] = value.isoformat()
    if base.tau2 is not None and base.sigma_w2 is not None:
        doc["tau2"], doc["sigma_w2"] = float(base.tau2), float(base.sigma_w2)
    if base.dispersion is not None:
        doc["dispersion"] = float(base.dispersion)
    assert chosen.terms[0] == INTERCEPT
    return doc


def write_description(doc: dict[str, Any], path: Path | None) -> str:
    """The description as ``model import`` reads it from ``path``: TOML for a ``.toml`` file,
    JSON for ``.json`` (JSON when there is no path, for standard output); returns the text.
    Floats are written in their shortest exact form, so an import plans exactly alike."""
    suffix = path.suffix.lower() if path is not None else ".json"
    if suffix not in DESCRIPTION_FORMATS:
        raise InputError(f"--out {path}: 'model import' reads .toml or .json files; "
                         "name the file with one of these extensions")
    text = toml_text(doc) if suffix == ".toml" else json.dumps(doc, indent=2) + "\n"
    if path is not None:
        try:
            path.write_text(text, encoding="utf-8")
        except OSError as exc:
            raise InputError(f"{path} could not be written: {exc}") from exc
    return text
