"""Models: names safe for folders, 1..8 distinct columns, idempotent creation."""

from __future__ import annotations

import threading
from datetime import UTC, date, datetime

import pytest
from sqlalchemy import func, select

from monitor.domain.model import ModelSpec
from monitor.errors import InputError, NotFoundError, StateError
from monitor.store.batches import start_batch
from monitor.store.engine import write_transaction
from monitor.store.models import (
    create_model,
    delete_model,
    find_model,
    find_model_by_id,
    get_model,
    list_models,
)
from monitor.store.schema import observations

NOW = datetime(2026, 3, 14, 12, tzinfo=UTC)
LOADS = ModelSpec("loads", "load_minutes", ("pallets",), "docked_at", "load_id")


def test_create_find_list_and_idempotence(engine) -> None:
    with engine.begin() as conn:
        record = create_model(conn, LOADS, NOW)
        again = create_model(conn, LOADS, NOW)
        create_model(conn, ModelSpec("repairs", "hours", ("size", "parts"), "done_at"), NOW)
    assert record.id == again.id and record.spec == LOADS
    with engine.connect() as conn:
        assert find_model(conn, "nope") is None
        assert get_model(conn, "loads").predictors == ("pallets",)
        assert [m.name for m in list_models(conn)] == ["loads", "repairs"]
        assert get_model(conn, "repairs").id_column is None
        assert get_model(conn, "loads").created_at == NOW
        with pytest.raises(NotFoundError, match="known models: loads, repairs"):
            get_model(conn, "trucks")


def test_same_name_other_columns_is_refused(engine) -> None:
    with engine.begin() as conn:
        create_model(conn, LOADS, NOW)
        with pytest.raises(StateError, match="already exists with other columns"):
            create_model(conn, ModelSpec("loads", "load_minutes", ("pallets", "door"),
                                         "docked_at", "load_id"), NOW)


@pytest.mark.parametrize("kwargs, message", [
    ({"name": "../etc"}, "not allowed"),
    ({"name": ".hidden"}, "not allowed"),
    ({"name": "a b"}, "not allowed"),
    ({"name": "x" * 101}, "not allowed"),
    ({"predictors": ()}, "1 to 8 predictor"),
    ({"predictors": tuple(f"x{i}" for i in range(9))}, "1 to 8 predictor"),
    ({"predictors": ("pallets", "pallets")}, "used twice"),
    ({"time_column": "load_minutes"}, "used twice"),
    ({"id_column": " load_id"}, "surrounding spaces"),
])
def test_invalid_specs(kwargs: dict, message: str) -> None:
    fields = {"name": "loads", "response": "load_minutes", "predictors": ("pallets",),
              "time_column": "docked_at", "id_column": "load_id", **kwargs}
    with pytest.raises(InputError, match=message):
        ModelSpec(**fields)


def test_a_delete_waits_for_an_ingest_holding_the_model_and_leaves_none_of_its_rows(
        engine) -> None:
    # Observations refer to their model without a foreign key (migration 0007): an ingest holds
    # the model's row until it commits, and a delete locks that row before it deletes the rows,
    # so rows committed meanwhile are deleted too, never left behind (PostgreSQL: FOR KEY SHARE
    # against FOR UPDATE; SQLite: one writer at a time).
    with engine.begin() as conn:
        model = create_model(conn, LOADS, NOW)
    result: dict[str, dict[str, int]] = {}

    def delete() -> None:
        with write_transaction(engine) as conn:
            result["counts"] = delete_model(conn, model)

    other = threading.Thread(target=delete)
    with write_transaction(engine, foreign_keys=False) as conn:
        assert find_model_by_id(conn, model.id, hold=True) is not None
        batch = start_batch(conn, model.id, "loads.csv", None, None, False, NOW)
        conn.execute(observations.insert().values(
            model_id=model.id, batch_id=batch, obs_key="L1", observed_at_us=0,
            day=date(2026, 3, 14), y=31.0, x1=12.0))
        other.start()
        other.join(timeout=1.5)
        assert other.is_alive()  # the delete waits for the ingest
    other.join(timeout=60)
    assert not other.is_alive() and result["counts"]["observations"] == 1
    with engine.connect() as conn:
        left = conn.execute(select(func.count()).select_from(observations)).scalar_one()
        assert left == 0 and find_model(conn, "loads") is None
