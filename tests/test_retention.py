"""Retention: raw rows past a horizon are pruned, and what the nights, refit, compare, report
and rows need still works (or says clearly that the rows are gone).

The statistics compared here are fitwatch's own before and after pruning; the fit from merged
day statistics is checked against the raw-row fit in tests/stats (NIST StRD, statsmodels).
"""

from __future__ import annotations

from dataclasses import replace
from datetime import date
from pathlib import Path

import pytest
from sqlalchemy import Engine, func, select

from monitor.config import StorageSettings, parse_settings
from monitor.errors import ConfigError, InputError, NotFoundError, StateError
from monitor.lifecycle.compare import compare
from monitor.lifecycle.pruning import prune
from monitor.lifecycle.refit import refit
from monitor.monitoring.day_rows import score_day
from monitor.report.page import write_report
from monitor.runtime.nightly import run_night
from monitor.store.audit import log_lines
from monitor.store.schema import day_checks, day_stats, observations
from tests.support.snapshots import WorldCache
from tests.support.world import (
    CHANGED,
    FIT_CANDIDATE,
    LAST_DAY,
    MODEL,
    REACH_REFIT,
    World,
    loads_between,
    night_after,
    settings_for,
    write_csv,
)

PRUNE_BEFORE = date(2026, 3, 25)  # nine days into the candidate's window (16 March on)


def _count(engine: Engine, table, *where) -> int:
    with engine.connect() as conn:
        return int(conn.execute(select(func.count()).select_from(table).where(*where))
                   .scalar_one())


@pytest.fixture
def with_candidate(worlds: WorldCache, engine: Engine, make_settings, tmp_path: Path) -> World:
    """The slope change of 16 March, refit advised, candidate 2 fitted on 16 March .. 12 April."""
    return worlds.world(engine, settings_for(make_settings, engine), tmp_path, CHANGED, 71,
                        (REACH_REFIT, FIT_CANDIDATE))


@pytest.mark.slow
def test_after_pruning_check_refit_compare_report_and_rows_still_work(
        with_candidate: World, tmp_path: Path) -> None:
    world, settings, engine = with_candidate, with_candidate.settings, with_candidate.engine
    before = compare(settings, MODEL, engine=engine)
    stats_before, checks_before = _count(engine, day_stats), _count(engine, day_checks)

    dry = prune(settings, before=PRUNE_BEFORE, dry_run=True, now=night_after(LAST_DAY),
                actor="test", engine=engine)
    assert dry[0].rows > 0 and dry[0].through == date(2026, 3, 24)
    assert _count(engine, observations, observations.c.day < PRUNE_BEFORE) == dry[0].rows
    done = prune(settings, before=PRUNE_BEFORE, now=night_after(LAST_DAY), actor="test",
                 engine=engine)
    assert (done[0].rows, done[0].days) == (dry[0].rows, dry[0].days)
    assert done[0].first == date(2026, 1, 5)
    assert _count(engine, observations, observations.c.day < PRUNE_BEFORE) == 0
    assert _count(engine, observations) > 0
    # day statistics and checks are kept
    assert (_count(engine, day_stats), _count(engine, day_checks)) == (stats_before,
                                                                      checks_before)
    with engine.connect() as conn:
        entry = [line for line in log_lines(conn, MODEL) if line.action == "prune"]
    assert len(entry) == 1 and entry[0].details["through"] == "2026-03-24"

    # compare refits the candidate on 16 March .. 5 April from the window's day statistics
    # (nine of those days have lost their rows): the same line as from the rows (fits agree
    # to ~1e-13 relative), hence the same figures and advice
    after = compare(settings, MODEL, engine=engine)
    assert after.recommendation.action == before.recommendation.action
    assert after.holdout == before.holdout
    assert after.candidate_score is not None and before.candidate_score is not None
    assert after.candidate_score.rmse == pytest.approx(before.candidate_score.rmse, rel=1e-9)
    assert after.candidate_score.coverage == before.candidate_score.coverage
    with pytest.raises(StateError, match=r"pruned by retention.*--holdout-days"):
        compare(settings, MODEL, holdout_days=19, engine=engine)

    # a fit needs the rows of its whole window: a clear refusal, and a refit after the
    # pruned days works
    with pytest.raises(StateError, match=r"before 2026-03-25 were pruned.*--start 2026-03-25"):
        refit(settings, MODEL, start=date(2026, 3, 16), now=night_after(LAST_DAY),
              engine=engine)
    refitted = refit(settings, MODEL, start=date(2026, 3, 30), now=night_after(LAST_DAY),
                     engine=engine)
    assert refitted.candidate.fit_start == date(2026, 3, 30)

    # rows of a pruned day: one clear line; of a kept day: as before
    with pytest.raises(NotFoundError, match="for 2026-03-10 were pruned by retention on"):
        score_day(settings, MODEL, date(2026, 3, 10), engine=engine)
    assert len(score_day(settings, MODEL, date(2026, 4, 1), engine=engine).rows) > 0

    # the nights go on
    world.add_days(date(2026, 4, 13), date(2026, 4, 14), 713, "late_april.csv")
    new = world.check(date(2026, 4, 14))
    assert [c.day for c in new.checks] == [date(2026, 4, 13), date(2026, 4, 14)]
    assert all(c.n > 0 for c in new.checks)

    report = write_report(settings, MODEL, tmp_path / "report", engine=engine,
                          now=night_after(date(2026, 4, 14)))
    assert report.path.is_file() and report.status is not None


@pytest.mark.slow
def test_late_rows_for_a_pruned_day_are_rejected_with_a_reason(with_candidate: World) -> None:
    world, engine = with_candidate, with_candidate.engine
    prune(world.settings, before=PRUNE_BEFORE, now=night_after(LAST_DAY), actor="test",
          engine=engine)
    late = loads_between(CHANGED, date(2026, 3, 23), date(2026, 3, 26), 881)
    late["load_id"] = "late-" + late["load_id"].astype(str)
    summary = world.ingest(write_csv(late, world.tmp / "late.csv"), LAST_DAY)
    on_pruned = int((late["docked_at"].str[:10] < "2026-03-25").sum())
    assert summary.reasons == {"before_retention": on_pruned}
    assert summary.accepted == len(late) - on_pruned  # 25 and 26 March are kept: rows go in
    assert summary.read == summary.accepted + summary.duplicates + summary.rejected
    # the accepted late rows make 25 March stale; a prune never takes a stale day's rows
    again = prune(world.settings, before=date(2026, 4, 1), now=night_after(LAST_DAY),
                  actor="test", engine=engine)
    assert again[0].through == date(2026, 3, 24) and again[0].rows == 0


@pytest.mark.slow
def test_the_nightly_run_prunes_past_the_horizon_and_never_unchecked_days(
        worlds: WorldCache, engine: Engine, make_settings, tmp_path: Path) -> None:
    world = worlds.world(engine, settings_for(make_settings, engine), tmp_path, CHANGED, 71,
                         (REACH_REFIT,))
    settings = replace(world.settings, storage=StorageSettings(keep_rows_days=60))
    # 13 April ingested, not checked yet: its rows must stay whatever the horizon
    world.add_days(date(2026, 4, 13), date(2026, 4, 13), 713, "april_13.csv")
    run = run_night(settings, engine, now=night_after(LAST_DAY))
    assert run.status == "ok", run.problems
    assert len(run.pruned) == 1 and run.pruned[0].through == date(2026, 2, 11)  # 12 Apr - 60
    assert _count(engine, observations, observations.c.day <= date(2026, 2, 11)) == 0
    assert _count(engine, observations, observations.c.day == date(2026, 2, 12)) > 0
    assert _count(engine, observations, observations.c.day == date(2026, 4, 13)) > 0
    # the next night: nothing is past the horizon by a week yet, so nothing is pruned
    later = run_night(settings, engine, now=night_after(date(2026, 4, 13)))
    assert later.pruned == () and later.status == "ok"


def test_prune_by_hand_is_refused_without_a_horizon(engine: Engine, make_settings) -> None:
    settings = make_settings(engine.url.render_as_string(hide_password=False))
    with pytest.raises(InputError, match="keep_rows_days is 0"):
        prune(settings, engine=engine)


def test_keep_rows_days_is_validated() -> None:
    assert parse_settings({}).storage.keep_rows_days == 0
    assert parse_settings({"storage": {"keep_rows_days": 90}}).storage.keep_rows_days == 90
    for bad in (30, -1, "90"):
        with pytest.raises(ConfigError, match=r"storage\.keep_rows_days"):
            parse_settings({"storage": {"keep_rows_days": bad}})
    with pytest.raises(ConfigError, match=r"storage\.keep"):
        parse_settings({"storage": {"keep": 90}})


def test_nothing_on_an_unchecked_model_is_pruned(engine: Engine, make_settings,
                                                 tmp_path: Path) -> None:
    world = World(engine, settings_for(make_settings, engine), tmp_path, CHANGED, 5)
    rows = _count(engine, observations)
    done = prune(world.settings, before=date(2026, 12, 1), engine=engine, actor="test")
    assert done[0].rows == 0 and "not checked" in done[0].why_not
    assert _count(engine, observations) == rows > 0
