"""Shared worlds for the report tests, built through the real pipeline once per session.

The data come from the project's own scenario generator (``monitor.demo.scenario``) via the
``World`` helper of ``tests/test_check.py``: fit the demo model, ingest days, run the checks.
Building a world takes a few seconds, so each is built once, on its own SQLite file; the
report tests only read them.
"""

from __future__ import annotations

from collections.abc import Iterator
from datetime import date
from pathlib import Path

import pytest

from monitor.config import parse_settings
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.store.engine import open_engine, upgrade_database
from tests.test_check import CALM, MODEL, WORDS, World, _now
from tests.test_refit import CHANGED

LAST_DAY = date(2026, 4, 12)


def _world(folder: Path, scenario, seed: int) -> World:
    url = f"sqlite:///{folder / 'fitwatch.db'}"
    engine = open_engine(url)
    upgrade_database(engine)
    settings = parse_settings({"database": {"url": url},
                               "schedule": {"timezone": "Europe/Berlin"},
                               "models": WORDS}, "<report test settings>")
    return World(engine, settings, folder, scenario=scenario, seed=seed)


@pytest.fixture(scope="session")
def changed(tmp_path_factory: pytest.TempPathFactory) -> Iterator[World]:
    """A slope change on 16 March reaching 'refit', then a candidate version 2 fitted after it
    (the ``changed`` pattern of tests/test_refit.py)."""
    world = _world(tmp_path_factory.mktemp("changed"), CHANGED, 71)
    world.add_days(date(2026, 3, 9), LAST_DAY, 72, "spring.csv")
    assert world.check(LAST_DAY).checks[-1].status == "refit"
    fit_model(world.settings, FitRequest(MODEL, start=date(2026, 3, 16), end=LAST_DAY),
              now=_now(LAST_DAY), engine=world.engine, actor="test")
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
