"""A nightly run killed (SIGKILL, a real child process) between its checks and its alerts loses
no night's news: the next run queues every message the stored checks call for, exactly once.

The oracle is independent of the queue's bookkeeping: the digests that ``alerts/news.py`` derives
from every stored check (what an uninterrupted run queues). Before ``queued_nights`` existed,
the rerun queued nothing here (the run that checked the nights had died).
"""

from __future__ import annotations

import email
from datetime import date
from email import policy
from pathlib import Path

import pytest
from sqlalchemy import Engine, func, select

from monitor.config import load_settings
from monitor.store.schema import day_checks
from tests.support.night_child import expected_keys, night_config, outbox_rows, run_child
from tests.support.world import CHANGED, MODEL, World, loads_between, night_after, write_csv

LAST = date(2026, 4, 5)


def _world(engine: Engine, tmp: Path) -> World:
    config = night_config(tmp, engine.url.render_as_string(hide_password=False))
    world = World(engine, load_settings(config), tmp, scenario=CHANGED, seed=5)
    folder = tmp / "inbox" / MODEL
    folder.mkdir(parents=True)
    write_csv(loads_between(CHANGED, date(2026, 3, 9), LAST, 22), folder / "weeks.csv")
    return world


@pytest.mark.slow
@pytest.mark.parametrize("point", ["before_queue", "after_queue:3"])
def test_a_run_killed_between_checks_and_alerts_loses_no_message(
        engine: Engine, tmp_path: Path, point: str) -> None:
    world = _world(engine, tmp_path)
    config = tmp_path / "fitwatch.toml"
    assert run_child(point, config, night_after(LAST)) == -9  # it died at the point
    with engine.connect() as conn:
        assert conn.execute(select(func.max(day_checks.c.day))).scalar() == LAST
    if point == "before_queue":
        assert outbox_rows(engine) == []

    assert run_child("none", config, night_after(LAST)) == 0
    keys = [key for key, _ in outbox_rows(engine)]
    wanted = expected_keys(world.settings, engine)
    assert wanted, "the slope change of 16 March reaches refit: there is news"
    assert sorted(keys) == sorted(wanted)  # every message, none twice
    assert {status for _, status in outbox_rows(engine)} == {"sent"}
    mails = sorted((tmp_path / "mail").glob("*.eml"))
    assert len(mails) == len(wanted)
    subjects = [email.message_from_bytes(p.read_bytes(), policy=policy.default)["Subject"]
                for p in mails]
    assert sum("needs a refit" in s and "reminder" not in s for s in subjects) == 1
    # a third run finds nothing left to queue
    assert run_child("none", config, night_after(LAST)) == 0
    assert len(outbox_rows(engine)) == len(wanted)
