"""Models: a named mapping of columns (response, predictors, time, optional id)."""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import Connection, select

from monitor.config import MAX_PREDICTORS
from monitor.errors import InputError, NotFoundError, StateError
from monitor.store.schema import models

NAME_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,99}")
_COLUMN_LIMIT = 200


@dataclass(frozen=True)
class ModelSpec:
    """Which input columns a model reads."""

    name: str
    response: str
    predictors: tuple[str, ...]
    time_column: str
    id_column: str | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "predictors", tuple(self.predictors))
        if not NAME_PATTERN.fullmatch(self.name or "") or self.name.endswith("."):
            raise InputError(f"model name {self.name!r} is not allowed; use 1 to 100 letters, "
                             "digits, '_', '-' or '.', starting with a letter or digit")
        if not 1 <= len(self.predictors) <= MAX_PREDICTORS:
            raise InputError(f"model {self.name} needs 1 to {MAX_PREDICTORS} predictor columns; "
                             f"got {len(self.predictors)}")
        for column in self.columns:
            if not column.strip() or len(column) > _COLUMN_LIMIT or column != column.strip():
                raise InputError(f"column name {column!r} of model {self.name} is empty, longer "
                                 f"than {_COLUMN_LIMIT} characters or has surrounding spaces")
        seen: set[str] = set()
        for column in self.columns:
            if column in seen:
                raise InputError(f"column '{column}' is used twice in model {self.name}; the "
                                 "response, predictors, time and id columns must differ")
            seen.add(column)

    @property
    def columns(self) -> tuple[str, ...]:
        """Every column the model reads: predictors, response, time, then id (if any)."""
        extra = (self.id_column,) if self.id_column else ()
        return (*self.predictors, self.response, self.time_column, *extra)

    @property
    def k(self) -> int:
        return len(self.predictors)


@dataclass(frozen=True, kw_only=True)
class ModelRecord(ModelSpec):
    """A stored model."""

    id: int
    created_at: datetime

    @property
    def spec(self) -> ModelSpec:
        return ModelSpec(self.name, self.response, self.predictors, self.time_column,
                         self.id_column)


def _record(row: object) -> ModelRecord:
    m = row._mapping  # type: ignore[attr-defined]
    return ModelRecord(name=m["name"], response=m["response"],
                       predictors=tuple(m["predictors"]), time_column=m["time_column"],
                       id_column=m["id_column"], id=m["id"], created_at=m["created_at"])


def find_model(conn: Connection, name: str) -> ModelRecord | None:
    row = conn.execute(select(models).where(models.c.name == name)).first()
    return None if row is None else _record(row)


def find_model_by_id(conn: Connection, model_id: int) -> ModelRecord | None:
    row = conn.execute(select(models).where(models.c.id == model_id)).first()
    return None if row is None else _record(row)


def list_models(conn: Connection) -> list[ModelRecord]:
    return [_record(row) for row in conn.execute(select(models).order_by(models.c.name))]


def get_model(conn: Connection, name: str) -> ModelRecord:
    found = find_model(conn, name)
    if found is None:
        known = [m.name for m in list_models(conn)]
        hint = f"known models: {', '.join(known)}" if known else "no model is defined yet"
        raise NotFoundError(f"no model named '{name}'; {hint}")
    return found


def create_model(conn: Connection, spec: ModelSpec, now: datetime) -> ModelRecord:
    """Store a new model; returns the existing one when it maps the same columns."""
    existing = find_model(conn, spec.name)
    if existing is not None:
        if existing.spec == spec:
            return existing
        raise StateError(f"model '{spec.name}' already exists with other columns "
                         f"({_describe(existing.spec)}); asked for ({_describe(spec)})")
    row_id = conn.execute(models.insert().values(
        name=spec.name, response=spec.response, predictors=list(spec.predictors),
        time_column=spec.time_column, id_column=spec.id_column, created_at=now,
    )).inserted_primary_key[0]
    return ModelRecord(name=spec.name, response=spec.response, predictors=spec.predictors,
                       time_column=spec.time_column, id_column=spec.id_column, id=int(row_id),
                       created_at=now)


def _describe(spec: ModelSpec) -> str:
    text = f"y={spec.response}, x={','.join(spec.predictors)}, time={spec.time_column}"
    return text + (f", id={spec.id_column}" if spec.id_column else "")
