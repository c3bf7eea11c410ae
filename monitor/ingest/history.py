"""What earlier ingestions stored and rejected: a model's batches, and their rejected rows.

A rejected row has no trusted day of its own (its time may be what was wrong with it), so rows
are found by batch: one batch by its id, or every batch ingested on a calendar day in the
configured zone (the day the file was read, not the days of its rows).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime, time, timedelta

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.model import ModelRecord
from monitor.errors import NotFoundError
from monitor.store.access import database
from monitor.store.batches import (
    BatchRecord,
    RejectedRow,
    batches_started_between,
    get_batch,
    list_batches,
    rejected_rows_of,
)
from monitor.store.models import get_model


@dataclass(frozen=True)
class BatchRejections:
    """One batch and the rows it rejected (with line number, raw text and reason)."""

    batch: BatchRecord
    rows: tuple[RejectedRow, ...]


@dataclass(frozen=True)
class Rejections:
    """The rejected rows of the batches asked for: one batch, or those of an ingest day."""

    model: ModelRecord
    batches: tuple[BatchRejections, ...]
    batch_id: int | None = None
    ingest_day: date | None = None

    @property
    def count(self) -> int:
        return sum(len(b.rows) for b in self.batches)


@dataclass(frozen=True)
class BatchList:
    """Every batch of a model, oldest first (to find a batch's id)."""

    model: ModelRecord
    batches: tuple[BatchRecord, ...]


def model_batches(settings: Settings, name: str, *, engine: Engine | None = None) -> BatchList:
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        model = get_model(conn, name)
        return BatchList(model, tuple(list_batches(conn, model.id)))


def rejected_rows(settings: Settings, name: str, *, batch: int | None = None,
                  day: date | None = None, engine: Engine | None = None) -> Rejections:
    """The rows rejected by batch ``batch``, or by the batches ingested on ``day``."""
    if (batch is None) == (day is None):
        raise ValueError("give exactly one of batch and day")
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        model = get_model(conn, name)
        if batch is not None:
            try:
                found = [get_batch(conn, batch)]
            except NotFoundError:
                found = []
            if not found or found[0].model_id != model.id:
                raise NotFoundError(f"'{name}' has no batch {batch}; its batches are listed by "
                                    f"'fitwatch rows {name} --rejected'")
        else:
            assert day is not None
            zone = settings.timezone
            start = datetime.combine(day, time(0), tzinfo=zone)
            end = datetime.combine(day + timedelta(days=1), time(0), tzinfo=zone)
            found = batches_started_between(conn, model.id, start, end)
        listed = tuple(BatchRejections(b, tuple(rejected_rows_of(conn, b.id))) for b in found)
    return Rejections(model, listed, batch_id=batch, ingest_day=day)
