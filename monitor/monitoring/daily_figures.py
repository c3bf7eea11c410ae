"""The stored figures of past checks as a time series: one entry per model and checked day.

Read only: what the nights stored (``day_checks``), with the number of the version that scored
each day. Nothing is recomputed, so an export says exactly what the checks said.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.check import DayCheck
from monitor.errors import InputError
from monitor.store.access import database
from monitor.store.checks import load_checks
from monitor.store.models import get_model, list_models
from monitor.store.versions import list_versions


@dataclass(frozen=True)
class CheckedDay:
    """One model-day's stored check and the number of the version that scored it."""

    check: DayCheck
    version: int


def daily_figures(settings: Settings, names: Sequence[str] | None = None, *,
                  first: date | None = None, last: date | None = None,
                  engine: Engine | None = None) -> list[CheckedDay]:
    """The checked days of the named models (default: all), by model name, then day."""
    if first is not None and last is not None and first > last:
        raise InputError(f"the first day {first} is after the last day {last}")
    out: list[CheckedDay] = []
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        models = ([get_model(conn, n) for n in dict.fromkeys(names)] if names
                  else list_models(conn))
        for model in sorted(models, key=lambda m: m.name):
            numbers = {v.id: v.number for v in list_versions(conn, model.id)}
            out.extend(CheckedDay(c, numbers[c.version_id])
                       for c in load_checks(conn, model.id, first, last, model=model.name))
    return out
