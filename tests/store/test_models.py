"""Models: names safe for folders, 1..8 distinct columns, idempotent creation."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from monitor.domain.model import ModelSpec
from monitor.errors import InputError, NotFoundError, StateError
from monitor.store.models import create_model, find_model, get_model, list_models

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
