"""Checks racing other writers on PostgreSQL (SQLite's write lock serialises them already).

- A block reads its rows and its day statistics in one snapshot: rows committed between the
  two reads must not be counted in the revision the check records without being scored
  (before, under READ COMMITTED, such a day was stored as checked at the new revision with
  one row fewer, and never rechecked).
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import date
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import Engine, select

import monitor.monitoring.check as check
from monitor.config import Settings
from monitor.store.schema import day_checks, day_stats
from tests.support.world import CALM, World, loads_between, settings_for, write_csv

LAST = date(2026, 3, 12)


POSTGRES_ONLY = pytest.mark.parametrize(
    "backend", [pytest.param("postgresql", marks=pytest.mark.postgres)])


@POSTGRES_ONLY
def test_rows_committed_during_a_block_are_scored_or_left_stale(
        engine: Engine, make_settings: Callable[..., Settings], tmp_path: Path,
        monkeypatch: pytest.MonkeyPatch) -> None:
    world = World(engine, settings_for(make_settings, engine), tmp_path)
    world.add_days(date(2026, 3, 9), LAST, 41, "days.csv")
    late = loads_between(CALM, LAST, LAST, 42).head(1).assign(load_id="late-row-1")
    late_file = write_csv(late, tmp_path / "late.csv")
    real = check.load_observations
    injected = []

    def rows_then_a_commit(conn: Any, *args: Any, **kwargs: Any) -> Any:
        rows = real(conn, *args, **kwargs)
        if not injected:  # another writer commits a row of LAST between the two reads
            injected.append(world.ingest(late_file, LAST))
        return rows

    monkeypatch.setattr(check, "load_observations", rows_then_a_commit)
    world.check(LAST)
    monkeypatch.undo()
    assert injected and injected[0].accepted == 1
    world.check(LAST)  # a stale day is found and rechecked; a consistent one stays
    with engine.connect() as conn:
        checked = conn.execute(select(day_checks.c.n, day_checks.c.stats_revision)
                               .where(day_checks.c.day == LAST)).one()
        stored = conn.execute(select(day_stats.c.n, day_stats.c.revision)
                              .where(day_stats.c.day == LAST)).one()
    assert (checked.n, checked.stats_revision) == (stored.n, stored.revision)
