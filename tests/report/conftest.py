"""Shared worlds for the report tests, built through the real pipeline once per session.

The data come from the project's own scenario generator (``monitor.demo.scenario``) via the
``World`` helper of ``tests/support/world.py``: fit the demo model, ingest days, run the checks.
Building a world takes a few seconds, so each is built once, on its own SQLite file; the
report tests only read them.

The ``team`` world holds three models for the pages of several models and predictors: the
dock-loading model with an acknowledgement and a promotion, a two-predictor model on the Longley
data (Longley 1967, as shipped with statsmodels) whose second predictor is named ``<b>x</b>``,
and a model fitted but never checked.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from datetime import date, timedelta
from pathlib import Path

import pandas as pd
import pytest
import statsmodels.api as sm
from sqlalchemy import Engine

from monitor.config import Settings, parse_settings
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.lifecycle.refit import acknowledge, promote
from monitor.monitoring.check import run_checks
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from tests.support.snapshots import WorldCache
from tests.support.world import (
    CALM,
    CHANGED,
    FIT_CANDIDATE,
    LAST_DAY,
    MODEL,
    REACH_REFIT,
    WORDS,
    World,
    night_after,
)

# the Longley data, two rows a "day" from 1 January 2020: fitted on the first five days (ten
# years), the last three days (six years) checked
LONGLEY = "longley"
LONGLEY_FIT_END = date(2020, 1, 5)
LONGLEY_LAST = date(2020, 1, 8)
HOSTILE_COLUMN = "<b>x</b>"  # Longley's POP, under a name that is also markup
HOSTILE_REASON = "<script>alert('x')</script> training <b>week</b>"
ACKED = LAST_DAY + timedelta(days=1)  # the acknowledgement takes effect on 13 April
PROMOTED = date(2026, 4, 20)  # version 2 (fitted on 16 March to 19 April) scores from here
TEAM_LAST = date(2026, 4, 22)  # the dock-loading model is checked through this day
IDLE = "idle"  # fitted on all of Longley, never checked


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


def longley_frame(second: str = "POP") -> pd.DataFrame:
    """Longley's TOTEMP, GNP and POP (as ``second``), with a time stamp: two years a day."""
    data = sm.datasets.longley.load_pandas().data
    frame = data[["GNP", "POP", "TOTEMP"]].rename(columns={"POP": second})
    frame.insert(0, "at", [f"2020-01-{i // 2 + 1:02d} 1{i % 2}:00" for i in range(len(frame))])
    return frame


@dataclass(frozen=True)
class Team:
    """The ``team`` world: its database, settings and the Longley rows it was given."""

    engine: Engine
    settings: Settings
    longley: pd.DataFrame


@pytest.fixture(scope="session")
def team(tmp_path_factory: pytest.TempPathFactory, worlds: WorldCache) -> Iterator[Team]:
    folder = tmp_path_factory.mktemp("team")
    engine, settings = _database(folder)
    dock = worlds.world(engine, settings, folder, CHANGED, 71, (REACH_REFIT,))
    acknowledge(settings, MODEL, reason=HOSTILE_REASON, now=night_after(LAST_DAY),
                actor="test", engine=engine)
    dock.add_days(ACKED, PROMOTED - timedelta(days=1), 73, "after_ack.csv")
    dock.check(PROMOTED - timedelta(days=1))
    fit_model(settings, FitRequest(MODEL, start=CHANGED.layout_change,
                                   end=PROMOTED - timedelta(days=1)),
              now=night_after(PROMOTED - timedelta(days=1)), engine=engine, actor="test")
    moved = promote(settings, MODEL, 2, reason="the new layout", actor="test", engine=engine,
                    now=night_after(PROMOTED - timedelta(days=1)))
    assert moved.effective_day == PROMOTED
    dock.add_days(PROMOTED, TEAM_LAST, 74, "after_promotion.csv")
    dock.check(TEAM_LAST)

    frame = longley_frame(HOSTILE_COLUMN)
    path = folder / "longley.csv"
    frame.to_csv(path, index=False, float_format="%.17g")
    for name, end in ((LONGLEY, LONGLEY_FIT_END), (IDLE, None)):
        fit_model(settings, FitRequest(name, path, "TOTEMP", ("GNP", HOSTILE_COLUMN), "at",
                                       end=end),
                  now=night_after(LONGLEY_LAST), engine=engine, actor="test")
    run_checks(settings, [LONGLEY], through=LONGLEY_LAST, now=night_after(LONGLEY_LAST),
               engine=engine)
    yield Team(engine, settings, frame)
    engine.dispose()
