"""Stored models: finding, listing and creating them."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Connection, select

from monitor.domain.model import ModelRecord, ModelSpec
from monitor.errors import NotFoundError, StateError
from monitor.store.schema import inserted_id, models


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
    row_id = inserted_id(conn.execute(models.insert().values(
        name=spec.name, response=spec.response, predictors=list(spec.predictors),
        time_column=spec.time_column, id_column=spec.id_column, created_at=now,
    )))
    return ModelRecord(name=spec.name, response=spec.response, predictors=spec.predictors,
                       time_column=spec.time_column, id_column=spec.id_column, id=row_id,
                       created_at=now)


def _describe(spec: ModelSpec) -> str:
    text = f"y={spec.response}, x={','.join(spec.predictors)}, time={spec.time_column}"
    return text + (f", id={spec.id_column}" if spec.id_column else "")
