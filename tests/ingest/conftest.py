"""Fixtures for ingestion tests: the demo's 'loads' model on each backend."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import pytest
from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.model import ModelRecord, ModelSpec
from monitor.store.models import create_model

NOW = datetime(2026, 4, 1, 12, tzinfo=UTC)
LOADS = ModelSpec("loads", "load_minutes", ("pallets",), "docked_at", "load_id")
HASHED = ModelSpec("hashed", "load_minutes", ("pallets",), "docked_at")
HEADER = "load_id,docked_at,pallets,load_minutes,door"


@dataclass
class Store:
    """A database with the 'loads' (id column) and 'hashed' (no id) models."""

    settings: Settings
    engine: Engine
    loads: ModelRecord
    hashed: ModelRecord
    tmp: Path

    def write(self, name: str, text: str | bytes) -> Path:
        path = self.tmp / name
        if isinstance(text, str):
            path.write_text(text, encoding="utf-8", newline="")
        else:
            path.write_bytes(text)
        return path


@pytest.fixture
def store(engine: Engine, make_settings: Callable[..., Settings], tmp_path: Path) -> Store:
    url = engine.url.render_as_string(hide_password=False)
    settings = make_settings(url, models={
        "loads": {"ranges": {"pallets": [0, 60], "load_minutes": [0, 600]}}})
    with engine.begin() as conn:
        loads = create_model(conn, LOADS, NOW)
        hashed = create_model(conn, HASHED, NOW)
    return Store(settings, engine, loads, hashed, tmp_path)


def csv_text(*rows: str, header: str = HEADER, newline: str = "\n") -> str:
    return newline.join([header, *rows]) + newline
