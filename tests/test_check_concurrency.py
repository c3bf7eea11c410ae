"""Checks racing other writers on PostgreSQL (SQLite's write lock serialises them already).

- A block reads its rows and its day statistics in one snapshot: rows committed between the
  two reads must not be counted in the revision the check records without being scored
  (before, under READ COMMITTED, such a day was stored as checked at the new revision with
  one row fewer, and never rechecked).
- Two checks of one model at once: the second waits for the first (an advisory lock per
  model) and finds its days done, or after a long wait says so; never a UniqueViolation.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from collections.abc import Callable
from datetime import date, timedelta
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import Engine, func, select

import monitor.monitoring.check as check
from monitor.config import Settings
from monitor.errors import StateError
from monitor.store.migrate import head_revision
from monitor.store.model_lock import NAMESPACE, model_lock
from monitor.store.schema import day_checks, day_stats
from tests.support.world import CALM, World, loads_between, settings_for, write_csv

LAST = date(2026, 3, 12)
ROOT = Path(__file__).resolve().parents[1]


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


@POSTGRES_ONLY
def test_two_checks_at_once_check_each_day_once(
        engine: Engine, make_settings: Callable[..., Settings], tmp_path: Path) -> None:
    """Two real processes run ``fitwatch check`` on the same model at the same moment: the
    second waits for the first and finds the days done (before: UniqueViolation, exit 2)."""
    world = World(engine, settings_for(make_settings, engine), tmp_path)
    end = date(2026, 5, 10)
    world.add_days(date(2026, 3, 9), end, 43, "spring.csv")
    config = tmp_path / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{engine.url.render_as_string(hide_password=False)}"\n'
                      '[schedule]\ntimezone = "Europe/Berlin"\n')
    env = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONWARNINGS": "error"}
    command = [sys.executable, "-m", "monitor", "--config", str(config), "check", "--through",
               str(end), "--json"]
    procs = [subprocess.Popen(command, cwd=ROOT, env=env, stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True) for _ in range(2)]
    outs = [p.communicate(timeout=600) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], [err for _, err in outs]
    assert not any("Traceback" in err for _, err in outs)
    reported = sorted(c["day"] for out, _ in outs for c in json.loads(out))
    days = (end - date(2026, 3, 8)).days + 1  # from the day after the fit window
    assert len(reported) == len(set(reported)) == days  # each day checked by one of them
    with engine.connect() as conn:
        stored = conn.execute(select(func.count()).select_from(day_checks)).scalar_one()
    assert stored == days


@POSTGRES_ONLY
def test_a_check_that_cannot_get_the_model_says_why(engine: Engine) -> None:
    with engine.connect() as holder:
        holder.execute(select(func.pg_advisory_lock(NAMESPACE, 7)))
        try:
            said = re.escape("another fitwatch process has been checking model 'dock_loading' "
                             "for more than 0.2 s")
            with (pytest.raises(StateError, match=said),
                  model_lock(engine, 7, "dock_loading", wait=timedelta(seconds=0.2))):
                pass
        finally:
            holder.execute(select(func.pg_advisory_unlock(NAMESPACE, 7)))
            holder.commit()
    with model_lock(engine, 7, "dock_loading", wait=timedelta(seconds=0.2)):
        pass  # free again


@pytest.mark.postgres
def test_two_inits_at_once_on_a_fresh_postgresql_database(postgres_url: str) -> None:
    """Before: one of them printed a pg_type unique violation (both created the tables)."""
    import psycopg

    admin_url = postgres_url.rsplit("/", 1)[0] + "/test"
    env = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONWARNINGS": "error"}
    for attempt in range(3):
        name = f"fitwatch_init_race_{os.getpid()}_{attempt}"
        with psycopg.connect(admin_url, autocommit=True) as admin:
            admin.execute(f'CREATE DATABASE "{name}"')
        try:
            url = f"{admin_url.rsplit('/', 1)[0]}/{name}"
            procs = [subprocess.Popen([sys.executable, "-m", "monitor", "--db", url, "init"],
                                      cwd=ROOT, env=env, stdout=subprocess.PIPE,
                                      stderr=subprocess.PIPE, text=True) for _ in range(2)]
            outs = [p.communicate(timeout=300) for p in procs]
            assert [p.returncode for p in procs] == [0, 0], [err for _, err in outs]
            assert not any("violat" in err or "Traceback" in err for _, err in outs)
            assert all(f"at revision {head_revision()}" in out for out, _ in outs)
        finally:
            with psycopg.connect(admin_url, autocommit=True) as admin:
                admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def test_an_init_that_saw_no_revision_before_another_init_committed_reports_ready(
        engine: Engine, make_settings, monkeypatch: pytest.MonkeyPatch) -> None:
    """The window the race above can hit: this init read no revision, then the other init
    committed its tables and revision together, so the tables are there when this one looks.
    It must find the record now, not take the tables for a lost revision and stamp them."""
    import monitor.store.migrate as migrate

    real = migrate.current_revision
    reads: list[str | None] = []

    def first_read_before_the_other_commit(eng: Engine) -> str | None:
        reads.append(None if not reads else real(eng))
        return reads[-1]

    monkeypatch.setattr(migrate, "current_revision", first_read_before_the_other_commit)
    monkeypatch.setattr(migrate, "_record_lost_revision", lambda eng: pytest.fail("stamped"))
    settings = make_settings(engine.url.render_as_string(hide_password=False))
    result = migrate.init_database(settings)
    assert reads == [None, head_revision()]
    assert result.sentence().startswith(f"database ready at revision {head_revision()}")
