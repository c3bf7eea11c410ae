"""Fixtures for ingestion tests: the demo's 'loads' model on each backend."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest
from sqlalchemy import Engine

from monitor.config import Settings
from monitor.store.models import create_model
from tests.support.ingest import HASHED, LOADS, NOW, Store


@pytest.fixture
def store(engine: Engine, make_settings: Callable[..., Settings], tmp_path: Path) -> Store:
    url = engine.url.render_as_string(hide_password=False)
    settings = make_settings(url, models={
        "loads": {"ranges": {"pallets": [0, 60], "load_minutes": [0, 600]}}})
    with engine.begin() as conn:
        loads = create_model(conn, LOADS, NOW)
        hashed = create_model(conn, HASHED, NOW)
    return Store(settings, engine, loads, hashed, tmp_path)
