"""The dock-loading world: the demo model fitted on the scenario's history, on a real database.

Data come from the project's own demo scenario generator (``monitor.demo.scenario``; invented,
as the demo is). ``World`` fits the model on ``HISTORY`` and then adds days, ingests files and
runs the nightly check with the clock set to the night after each day.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
from sqlalchemy import Engine, select

from monitor.config import Settings
from monitor.demo.scenario import Scenario, generate_day
from monitor.ingest.service import ingest_file, options_for
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.lifecycle.refit import promote
from monitor.monitoring.check import run_checks
from monitor.store.models import get_model
from monitor.store.schema import day_checks

MODEL = "dock_loading"
CALM = Scenario(layout_change=date(2030, 1, 1), spread_change=date(2030, 1, 1))
# the slope goes from 2.1 to 2.6 minutes per pallet on 16 March
CHANGED = replace(CALM, layout_change=date(2026, 3, 16), minutes_per_pallet_after=2.6)
HISTORY = (date(2026, 1, 5), date(2026, 3, 8))
LAST_DAY = date(2026, 4, 12)  # the last day of the spring worlds the refit and report tests use

WORDS = {MODEL: {"words": {"row": "load", "rows": "loads", "y_unit": "min",
                          "x_units": {"pallets": "pallet"}}}}


def loads_between(scenario: Scenario, first: date, last: date, seed: int) -> pd.DataFrame:
    """The scenario's loads from ``first`` to ``last``, drawn with ``seed``."""
    rng = np.random.default_rng(seed)
    days = [first + timedelta(days=i) for i in range((last - first).days + 1)]
    return pd.concat([generate_day(rng, d, scenario) for d in days], ignore_index=True)


def write_csv(data: pd.DataFrame, path: Path) -> Path:
    data.to_csv(path, index=False)
    return path


def night_after(day: date) -> datetime:
    """03:00 UTC on the night after ``day``: when the nightly run would check it."""
    return datetime.combine(day + timedelta(days=1), datetime.min.time(), tzinfo=UTC) \
        + timedelta(hours=3)


def settings_for(make_settings: Callable[..., Settings], engine: Engine) -> Settings:
    return make_settings(engine.url.render_as_string(hide_password=False), models=WORDS)


class World:
    """A database with the dock-loading model fitted on the scenario's history."""

    def __init__(self, engine: Engine, settings: Settings, tmp: Path,
                 scenario: Scenario = CALM, seed: int = 7, *, fit: bool = True):
        self.engine, self.settings, self.tmp, self.scenario = engine, settings, tmp, scenario
        self.seed = seed
        if fit:
            history = write_csv(loads_between(scenario, *HISTORY, seed), tmp / "history.csv")
            fit_model(settings, FitRequest(MODEL, history, "load_minutes", ("pallets",),
                                           "docked_at", "load_id"),
                      now=night_after(HISTORY[1]), engine=engine, actor="test")

    @classmethod
    def attach(cls, engine: Engine, settings: Settings, tmp: Path,
               scenario: Scenario = CALM, seed: int = 7) -> World:
        """A world over a database that already holds the fitted model (a restored snapshot)."""
        return cls(engine, settings, tmp, scenario, seed, fit=False)

    def add_days(self, first: date, last: date, seed: int, name: str) -> Path:
        path = write_csv(loads_between(self.scenario, first, last, seed), self.tmp / name)
        self.ingest(path, last)
        return path

    def ingest(self, path: Path, day: date):
        with self.engine.connect() as conn:
            model = get_model(conn, MODEL)
        return ingest_file(self.engine, model, path,
                           options_for(self.settings, MODEL, now=night_after(day)))

    def check(self, through: date):
        return run_checks(self.settings, [MODEL], through=through, now=night_after(through),
                          engine=self.engine)

    def stored(self) -> list[dict]:
        with self.engine.connect() as conn:
            rows = conn.execute(select(day_checks).order_by(day_checks.c.day)).mappings().all()
        return [{k: v for k, v in r.items() if k != "checked_at"} for r in rows]


# Named steps for the world cache (tests/support/snapshots.py) on the CHANGED scenario, seed 71.
def _reach_refit(world: World) -> None:
    world.add_days(date(2026, 3, 9), LAST_DAY, 72, "spring.csv")
    assert world.check(LAST_DAY).checks[-1].status == "refit"


def _fit_candidate(world: World) -> None:
    fit_model(world.settings, FitRequest(MODEL, start=date(2026, 3, 16), end=LAST_DAY),
              now=night_after(LAST_DAY), engine=world.engine, actor="test")


REACH_REFIT = ("spring days checked through 12 April, refit advised", _reach_refit)
FIT_CANDIDATE = ("version 2 fitted on 16 March to 12 April", _fit_candidate)


# 13 April, after version 2 is promoted: one load far beyond the fitted range, one bad row
NEW_DAY = date(2026, 4, 13)
WIDE_PALLETS = 45  # the generator draws 4 to 33 pallets: far outside every fit window
BAD_ROW = "L260413-900,2026-04-13 12:00:00,20,abc,D01"


def new_day_text() -> str:
    """13 April's loads, one of them with 45 pallets, and a row whose minutes are 'abc'."""
    loads = loads_between(CHANGED, NEW_DAY, NEW_DAY, 913)
    wide = loads.iloc[[0]].assign(load_id="L260413-899", docked_at="2026-04-13 11:00:00",
                                  pallets=WIDE_PALLETS, load_minutes=110.0)
    return pd.concat([loads, wide], ignore_index=True).to_csv(index=False) + BAD_ROW + "\n"


def _promote_and_add_a_day(world: World) -> None:
    promote(world.settings, MODEL, 2, now=night_after(LAST_DAY), actor="test",
            engine=world.engine)
    path = world.tmp / "loads_2026-04-13.csv"
    path.write_text(new_day_text())
    summary = world.ingest(path, NEW_DAY)
    assert (summary.rejected, summary.reasons) == (1, {"not_a_number": 1})


PROMOTE_AND_ADD_A_DAY = ("version 2 promoted; 13 April ingested with a wide load and a bad row",
                         _promote_and_add_a_day)
