"""Shared worlds for the report tests, built through the real pipeline once per session.

The data come from the project's own scenario generator (``monitor.demo.scenario``) via the
``World`` helper of ``tests/support/world.py``: fit the demo model, ingest days, run the checks.
Building a world takes a few seconds, so each is built once, on its own SQLite file; the
report tests only read them.
"""

from __future__ import annotations

from collections.abc import Iterator
from datetime import date
from pathlib import Path

import pytest
from sqlalchemy import Engine

from monitor.config import Settings, parse_settings
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from tests.support.snapshots import WorldCache
from tests.support.world import CALM, CHANGED, FIT_CANDIDATE, LAST_DAY, REACH_REFIT, WORDS, World


def _database(folder: Path) -> tuple[Engine, Settings]:
    url = f"sqlite:///{folder / 'fitwatch.db'}"
    engine = open_engine(url)
    upgrade_database(engine)
    settings = parse_settings({"database": {"url": url},
                               "schedule": {"timezone": "Europe/Berlin"},
                               "models": WORDS}, "<report test settings>")
    return engine, settings


def _world(folder: Path, scenario, seed: int) -> World:
    return World(*_database(folder), folder, scenario=scenario, seed=seed)


@pytest.fixture(scope="session")
def changed(tmp_path_factory: pytest.TempPathFactory, worlds: WorldCache) -> Iterator[World]:
    """A slope change on 16 March reaching 'refit', then a candidate version 2 fitted after it
    (the ``with_candidate`` world of tests/test_refit.py, from the session's world cache)."""
    folder = tmp_path_factory.mktemp("changed")
    engine, settings = _database(folder)
    world = worlds.world(engine, settings, folder, CHANGED, 71, (REACH_REFIT, FIT_CANDIDATE))
    yield world
    world.engine.dispose()


@pytest.fixture(scope="session")
def calm(tmp_path_factory: pytest.TempPathFactory) -> Iterator[World]:
    """No change: the model stays in control; checked through 12 April."""
    world = _world(tmp_path_factory.mktemp("calm"), CALM, 7)
    world.add_days(date(2026, 3, 9), LAST_DAY, 11, "spring.csv")
    world.check(LAST_DAY)
    yield world
    world.engine.dispose()


@pytest.fixture(scope="session")
def fresh(tmp_path_factory: pytest.TempPathFactory) -> Iterator[World]:
    """Fitted, never checked: the report must still be written."""
    world = _world(tmp_path_factory.mktemp("fresh"), CALM, 5)
    yield world
    world.engine.dispose()
