"""The ingestion tests' store: the 'loads' model (id column) and 'hashed' (no id) on a database."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.model import ModelRecord, ModelSpec
from monitor.ingest.service import IngestOptions
from monitor.store.engine import open_engine
from monitor.store.models import get_model

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


def csv_text(*rows: str, header: str = HEADER, newline: str = "\n") -> str:
    return newline.join([header, *rows]) + newline


def child_model(url: str, name: str) -> tuple[Engine, ModelRecord]:
    """An ingest child process's engine on ``url`` and its model ``name``."""
    engine = open_engine(url)
    with engine.connect() as conn:
        return engine, get_model(conn, name)


def child_options(chunk_rows: int) -> IngestOptions:
    """The ingest child processes' options: Europe/Berlin, pallets 0 to 60, ingested at
    ``NOW`` with 5 minutes of future tolerance, ``chunk_rows`` rows a chunk."""
    return IngestOptions(ZoneInfo("Europe/Berlin"), {"pallets": (0.0, 60.0)}, False, NOW,
                         timedelta(minutes=5), chunk_rows, False)
