"""Stored models: finding, listing, creating, renaming and deleting them."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Connection, delete, func, select, update

from monitor.domain.model import ModelRecord, ModelSpec
from monitor.errors import NotFoundError, StateError
from monitor.store import audit
from monitor.store.schema import (
    batches,
    day_checks,
    day_stats,
    inserted_id,
    models,
    observations,
    rejected_rows,
    replaced_rows,
    versions,
)


def _record(row: object) -> ModelRecord:
    m = row._mapping  # type: ignore[attr-defined]
    return ModelRecord(name=m["name"], response=m["response"],
                       predictors=tuple(m["predictors"]), time_column=m["time_column"],
                       id_column=m["id_column"], id=m["id"], created_at=m["created_at"])


def find_model(conn: Connection, name: str) -> ModelRecord | None:
    row = conn.execute(select(models).where(models.c.name == name)).first()
    return None if row is None else _record(row)


def find_model_by_id(conn: Connection, model_id: int, *,
                     hold: bool = False) -> ModelRecord | None:
    """The model with this id; ``hold``: keep it from being deleted until the transaction ends
    (``FOR KEY SHARE`` on PostgreSQL; SQLite's write transaction already excludes a delete).
    An ingest holds its model: its rows refer to it without a foreign key."""
    query = select(models).where(models.c.id == model_id)
    if hold:
        query = query.with_for_update(read=True, key_share=True)
    row = conn.execute(query).first()
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


def rename_model(conn: Connection, model: ModelRecord, new_name: str) -> None:
    """Give ``model`` the name ``new_name`` (which must be free)."""
    if find_model(conn, new_name) is not None:
        raise StateError(f"a model named '{new_name}' exists already; pick another name")
    conn.execute(update(models).where(models.c.id == model.id).values(name=new_name))


def delete_model(conn: Connection, model: ModelRecord) -> dict[str, int]:
    """Remove ``model`` with its rows, batches, day statistics, checks and versions.

    Its audit entries stay (detached from the model, which no longer exists), so the history of
    what was done to it survives its deletion. Returns what was removed, per kind.
    """
    mid = model.id
    # first lock the model's row: an ingest under way holds it, and its rows (which refer to
    # the model without a foreign key) are then committed before they are counted and deleted
    conn.execute(select(models.c.id).where(models.c.id == mid).with_for_update())
    counted = {
        "observations": conn.execute(select(func.count()).select_from(observations)
                                     .where(observations.c.model_id == mid)).scalar_one(),
        "versions": conn.execute(select(func.count()).select_from(versions)
                                 .where(versions.c.model_id == mid)).scalar_one(),
        "day_checks": conn.execute(select(func.count()).select_from(day_checks)
                                   .where(day_checks.c.model_id == mid)).scalar_one(),
    }
    own_batches = select(batches.c.id).where(batches.c.model_id == mid)
    conn.execute(delete(day_checks).where(day_checks.c.model_id == mid))
    conn.execute(delete(observations).where(observations.c.model_id == mid))
    conn.execute(delete(rejected_rows).where(rejected_rows.c.batch_id.in_(own_batches)))
    conn.execute(delete(replaced_rows).where(replaced_rows.c.model_id == mid))
    conn.execute(delete(batches).where(batches.c.model_id == mid))
    conn.execute(delete(day_stats).where(day_stats.c.model_id == mid))
    audit.detach(conn, mid, model.name)
    conn.execute(delete(versions).where(versions.c.model_id == mid))
    conn.execute(delete(models).where(models.c.id == mid))
    return {k: int(v) for k, v in counted.items()}
