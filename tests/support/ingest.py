"""The ingestion tests' store: the 'loads' model (id column) and 'hashed' (no id) on a database."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.model import ModelRecord, ModelSpec

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
