"""Acting on advice: refit, compare, promote, roll back, acknowledge; and how checks replay them."""

from __future__ import annotations

import json
from dataclasses import replace
from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from sqlalchemy import Engine

from monitor.domain.action import Action
from monitor.domain.data_health import DataHealth, SilentFeed
from monitor.domain.status import Status
from monitor.errors import StateError, UsageError
from monitor.interface.cli import main
from monitor.interface.model_list import list_model_lines
from monitor.interface.status import ModelStatus, model_statuses
from monitor.interface.versions import show_version
from monitor.lifecycle.compare import compare
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.lifecycle.refit import acknowledge, promote, refit, rollback
from monitor.store import audit
from monitor.store.checks import last_check, load_checks
from monitor.store.models import get_model
from monitor.store.observations import load_observations
from monitor.store.standing import (
    LastStatus,
    VersionHead,
    active_head,
    last_status,
    version_numbers,
)
from monitor.store.versions import active_version, list_versions
from tests.support.snapshots import Step, WorldCache
from tests.support.world import (
    CALM,
    CHANGED,
    FIT_CANDIDATE,
    MODEL,
    REACH_REFIT,
    World,
    loads_between,
    night_after,
    settings_for,
    write_csv,
)


def _refit_from_30_march(world: World) -> None:
    refit(world.settings, MODEL, start=date(2026, 3, 30), engine=world.engine)


REFIT_FROM_30_MARCH = ("refit from 30 March", _refit_from_30_march)


def _changed(worlds: WorldCache, engine: Engine, make_settings, tmp_path: Path,
             *steps: Step) -> World:
    """The slope change of 16 March (seed 71) after ``steps``, built once per backend."""
    return worlds.world(engine, settings_for(make_settings, engine), tmp_path, CHANGED, 71,
                        (REACH_REFIT, *steps))


@pytest.fixture
def changed(worlds: WorldCache, engine: Engine, make_settings, tmp_path: Path) -> World:
    """A model that reached 'refit' after a slope change on 16 March."""
    return _changed(worlds, engine, make_settings, tmp_path)


@pytest.fixture
def with_candidate(worlds: WorldCache, engine: Engine, make_settings, tmp_path: Path) -> World:
    """``changed`` with a candidate version 2 fitted on 16 March to 12 April."""
    return _changed(worlds, engine, make_settings, tmp_path, FIT_CANDIDATE)


@pytest.fixture
def refitted_from_30_march(worlds: WorldCache, engine: Engine, make_settings,
                           tmp_path: Path) -> World:
    """``changed`` after ``refit --start 2026-03-30`` (a candidate on 12 days with rows)."""
    return _changed(worlds, engine, make_settings, tmp_path, REFIT_FROM_30_MARCH)


@pytest.fixture
def world(worlds: WorldCache, engine: Engine, make_settings, tmp_path: Path) -> World:
    return worlds.world(engine, settings_for(make_settings, engine), tmp_path, CALM, 7)


def _versions(world: World):
    with world.engine.connect() as conn:
        return list_versions(conn, get_model(conn, MODEL).id)


def test_promoting_a_refit_ends_the_advice(with_candidate: World) -> None:
    changed = with_candidate
    result = promote(changed.settings, MODEL, 2, reason="layout change",
                     now=night_after(date(2026, 4, 12)), actor="lead", engine=changed.engine)
    assert (result.active, result.previous, result.effective_day) == (2, 1, date(2026, 4, 13))
    v1, v2 = _versions(changed)
    assert (v1.state, v1.active_until) == ("retired", date(2026, 4, 12))
    assert (v2.state, v2.active_from) == ("active", date(2026, 4, 13))
    changed.add_days(date(2026, 4, 13), date(2026, 4, 26), 73, "after.csv")
    after = changed.check(date(2026, 4, 26)).checks
    assert after[0].version_id == v2.id and after[0].status == "ok"
    assert after[0].cusum_upper < after[0].cusum_h and after[0].cusum_lower < after[0].cusum_h
    assert all(c.status != "refit" for c in after)
    with changed.engine.connect() as conn:
        logged = audit.entries(conn, v1.model_id, ("promote",))
    assert logged[0].actor == "lead" and logged[0].reason == "layout change"


def test_late_rows_across_a_promotion_replay_the_same_history(with_candidate: World,
                                                              tmp_path: Path) -> None:
    changed = with_candidate
    promote(changed.settings, MODEL, 2, now=night_after(date(2026, 4, 12)), engine=changed.engine)
    changed.add_days(date(2026, 4, 13), date(2026, 4, 19), 74, "week.csv")
    changed.check(date(2026, 4, 19))
    before = changed.stored()
    late = loads_between(CHANGED, date(2026, 4, 10), date(2026, 4, 10), 75)
    late["load_id"] = "late-" + late["load_id"]
    changed.ingest(write_csv(late, tmp_path / "late.csv"), date(2026, 4, 19))
    result = changed.check(date(2026, 4, 19)).results[0]
    assert result.recomputed_from == date(2026, 4, 10)
    after = changed.stored()
    versions = {r["day"]: r["version_id"] for r in after}
    assert versions == {r["day"]: r["version_id"] for r in before}  # same versions per day
    assert [r["day"] for r in after] == [r["day"] for r in before]


def test_acknowledging_restarts_the_chart_and_releases_the_refit(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    burst = replace(CALM, minutes_base=30.0)
    world = World(engine, settings_for(make_settings, engine), tmp_path, seed=31)
    world.add_days(date(2026, 3, 9), date(2026, 3, 14), 32, "normal.csv")
    world.ingest(write_csv(loads_between(burst, date(2026, 3, 15), date(2026, 3, 21), 33),
                           tmp_path / "burst.csv"), date(2026, 3, 21))
    assert world.check(date(2026, 3, 21)).checks[-1].status == "refit"
    ack = acknowledge(world.settings, MODEL, reason="staff training week",
                      now=night_after(date(2026, 3, 21)), engine=engine)
    assert ack.effective_day == date(2026, 3, 22)
    world.add_days(date(2026, 3, 22), date(2026, 4, 18), 34, "after.csv")
    after = world.check(date(2026, 4, 18)).checks
    assert after[0].cusum_upper < after[0].cusum_h  # restarted on the 22nd
    assert after[-1].status != "refit"  # the burst's window has passed: the advice is gone


def test_rollback_brings_back_a_copy_of_the_earlier_version(with_candidate: World) -> None:
    changed = with_candidate
    promote(changed.settings, MODEL, 2, now=night_after(date(2026, 4, 12)), engine=changed.engine)
    changed.add_days(date(2026, 4, 13), date(2026, 4, 15), 76, "days.csv")
    changed.check(date(2026, 4, 15))
    result = rollback(changed.settings, MODEL, reason="wrong window",
                      now=night_after(date(2026, 4, 15)), actor="lead", engine=changed.engine)
    assert (result.active, result.previous, result.effective_day) == (3, 2, date(2026, 4, 16))
    v1, v2, v3 = _versions(changed)
    assert v3.state == "active" and v3.note == "copy of version 1"
    assert list(v3.coefficients) == list(v1.coefficients)
    assert (v2.active_from, v2.active_until) == (date(2026, 4, 13), date(2026, 4, 15))
    # Issue 13: it said "version 3 rolled back to by ..."; it names the version that came back
    assert result.copy_of == 1 and result.as_dict()["copy_of"] == 1
    assert result.sentence().startswith(
        f"{MODEL}: rolled back to version 1 by lead (wrong window): its line is active again "
        "as version 3 (a copy under a new number, because each version scores one unbroken run "
        "of days) and scores days from 2026-04-16; version 2 scored the days before")
    # rolling back again brings back version 2's line, as version 4
    changed.add_days(date(2026, 4, 16), date(2026, 4, 16), 78, "one_more.csv")
    changed.check(date(2026, 4, 16))
    again = rollback(changed.settings, MODEL, now=night_after(date(2026, 4, 16)), actor="lead",
                     engine=changed.engine)
    assert (again.copy_of, again.active, again.previous) == (2, 4, 3)
    assert again.sentence().startswith(f"{MODEL}: rolled back to version 2 by lead: its line is "
                                       "active again as version 4")
    v4 = _versions(changed)[3]
    assert v4.note == "copy of version 2" and list(v4.coefficients) == list(v2.coefficients)


def test_status_after_a_promotion_says_what_happened_and_what_comes_next(
        with_candidate: World) -> None:
    # Issue 13: status paired the new version's number with reasons computed under the old one
    changed = with_candidate
    promote(changed.settings, MODEL, 2, reason="layout change", actor="lead",
            now=night_after(date(2026, 4, 12)), engine=changed.engine)
    (status,) = model_statuses(changed.settings, now=night_after(date(2026, 4, 12)),
                               engine=changed.engine)
    text = status.sentence()
    head, label, *reasons = text.splitlines()
    assert head == (f"{MODEL}: version 2 active since 2026-04-13 (promoted by lead on "
                    "2026-04-13: layout change); not checked with it yet: the next check scores "
                    "from 2026-04-13 with fresh charts")
    assert label == "  last night under version 1 (2026-04-12): REFIT since " \
        f"{status.since}"
    assert reasons and all(r.startswith("    - ") for r in reasons)
    assert "stands until" not in text and "(version 2)" not in text
    doc = status.as_dict()
    assert (doc["active_version"], doc["last_check_version"]) == (2, 1)
    assert [(a["action"], a["version"], a["effective_day"]) for a in doc["actions_pending"]] \
        == [("promote", 2, date(2026, 4, 13))]
    (line,) = list_model_lines(changed.settings, engine=changed.engine)
    assert line.sentence().endswith("; v2 of 2; refit under v1 (checked through 2026-04-12)")
    with changed.engine.connect() as conn:  # the listing's column reads match whole rows
        model_id = get_model(conn, MODEL).id
        assert [(v.id, v.number, v.state) for v in version_numbers(conn, model_id)] \
            == [(v.id, v.number, v.state) for v in list_versions(conn, model_id)]
        last = last_check(conn, model_id)
        assert last is not None and last_status(conn, model_id) == LastStatus(
            last.day, last.status, last.status_since, last.reasons, last.version_id)
        active, head = active_version(conn, model_id), active_head(conn, model_id)
        assert active is not None and active.baseline.calibration is not None
        assert head == VersionHead(active.id, active.number, active.fit_start, active.fit_end,
                                   active.active_from, active.baseline.fit_days,
                                   active.baseline.calibration.h,
                                   active.baseline.calibration.h_known)
    # once a day is checked under version 2, status speaks of version 2 again
    changed.add_days(date(2026, 4, 13), date(2026, 4, 13), 79, "first.csv")
    changed.check(date(2026, 4, 13))
    (status,) = model_statuses(changed.settings, now=night_after(date(2026, 4, 13)),
                               engine=changed.engine)
    assert status.sentence().startswith(f"{MODEL}: OK since 2026-04-13, checked through "
                                        "2026-04-13 (version 2)")
    assert status.as_dict()["actions_pending"] == []


def test_status_after_an_acknowledgement_and_a_second_ack_refused(changed: World) -> None:
    ack = acknowledge(changed.settings, MODEL, reason="training week", actor="lead",
                      now=night_after(date(2026, 4, 12)), engine=changed.engine)
    assert ack.sentence().startswith(f"{MODEL}: the refit advice (since ")
    assert ack.sentence().endswith("acknowledged by lead (training week); the model stays on "
                                   "version 1 and its charts restart on 2026-04-13, the first "
                                   "day not checked yet")
    (status,) = model_statuses(changed.settings, now=night_after(date(2026, 4, 12)),
                               engine=changed.engine)
    text = status.sentence()
    assert text.splitlines()[0] == (
        f"{MODEL}: REFIT acknowledged by lead on 2026-04-13: training week; the model stays on "
        "version 1 until you refit or the evidence changes; its charts restart on 2026-04-13, "
        "the first day not checked yet")
    assert text.splitlines()[1] == ("  last check before the acknowledgement, under version 1 "
                                    f"(2026-04-12): REFIT since {status.since}")
    assert "stands until" not in text  # Issue 13: the acknowledged refit still "stood"
    # a second acknowledgement of the same advice is refused, and nothing is recorded
    with pytest.raises(StateError, match=r"the refit advice \(since .*\) was already "
                       r"acknowledged by lead on 2026-04-13: training week; the charts restart "
                       r"on 2026-04-13, the first day not checked yet; nothing changed"):
        acknowledge(changed.settings, MODEL, now=night_after(date(2026, 4, 12)),
                    engine=changed.engine)
    with changed.engine.connect() as conn:
        assert len(audit.entries(conn, get_model(conn, MODEL).id, ("ack",))) == 1


def test_status_after_an_action_still_says_when_rows_stopped_and_days_wait() -> None:
    ack = Action("ack", date(2026, 4, 13), "lead", None, 1, 1, recorded_on=date(2026, 4, 14))
    silent = SilentFeed(last_rows_day=date(2026, 4, 8), first_day=date(2026, 4, 9),
                        through=date(2026, 4, 12), days=4, expected_days=3.9, chance=1e-4,
                        level=1e-3, flagged_on=date(2026, 4, 11), calendar="the fit window")
    status = ModelStatus(MODEL, Status.WATCH, date(2026, 4, 10), date(2026, 4, 12),
                         ("Loads ran 3 min above plan",), 1, behind_days=2,
                         last_rows_day=date(2026, 4, 8), checked_version=1, pending=(ack,),
                         data=DataHealth(MODEL, silent=silent))
    lines = status.sentence().splitlines()
    assert lines[0].startswith(f"{MODEL}: WATCH acknowledged by lead on 2026-04-14; ")
    assert lines[0].endswith("; 2 complete day(s) not checked yet; the status judges the days "
                             "through 2026-04-08, the last with rows")
    assert any(line.startswith("  ! data: ") for line in lines)


@pytest.mark.slow
def test_rolling_back_a_promotion_not_yet_in_force(changed: World) -> None:
    # rows through 15 April stored but checked through the 12th only: a candidate fitted
    # through the 15th takes over on the 16th, so version 1 still scores the 13th to the 15th
    changed.add_days(date(2026, 4, 13), date(2026, 4, 15), 80, "unchecked.csv")
    fit_model(changed.settings, FitRequest(MODEL, start=date(2026, 3, 16),
                                           end=date(2026, 4, 15)),
              now=night_after(date(2026, 4, 15)), engine=changed.engine)
    assert promote(changed.settings, MODEL, 2, now=night_after(date(2026, 4, 15)),
                   engine=changed.engine).effective_day == date(2026, 4, 16)
    result = rollback(changed.settings, MODEL, now=night_after(date(2026, 4, 15)),
                      engine=changed.engine)
    assert (result.active, result.copy_of, result.effective_day) == (3, 1, date(2026, 4, 13))
    assert result.sentence().endswith("version 2 never scored a day (its promotion had not "
                                      "taken effect)")
    v1, v2, v3 = _versions(changed)
    assert v1.active_until == date(2026, 4, 12)  # not still "through 15 April"
    assert v3.active_from == date(2026, 4, 13) and v2.active_until < v2.active_from
    checks = changed.check(date(2026, 4, 15)).checks
    assert {c.version_id for c in checks} == {v3.id}


def test_refused_actions_say_why(world: World) -> None:
    with pytest.raises(StateError, match="no advice to acknowledge"):
        acknowledge(world.settings, MODEL, engine=world.engine)
    with pytest.raises(StateError, match="is active, not a candidate"):
        promote(world.settings, MODEL, 1, engine=world.engine)
    with pytest.raises(StateError, match="no other active version"):
        rollback(world.settings, MODEL, engine=world.engine)


@pytest.mark.slow
def test_commands(changed: World, capsys: pytest.CaptureFixture[str]) -> None:
    url = changed.engine.url.render_as_string(hide_password=False)
    config = changed.tmp / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{url}"\n[schedule]\ntimezone = "Europe/Berlin"\n')
    assert main(["--config", str(config), "model", "fit", MODEL, "--start", "2026-03-16"]) == 0
    capsys.readouterr()
    assert main(["--config", str(config), "ack", MODEL]) == 0
    assert "advice (since 2026-" in capsys.readouterr().out
    # the same advice again: refused with exit code 1 (a state error, README), nothing recorded
    assert main(["--config", str(config), "ack", MODEL]) == 1
    err = capsys.readouterr().err
    assert "was already acknowledged" in err and "nothing changed" in err
    assert main(["--config", str(config), "promote", MODEL, "2", "--reason", "new layout",
                 "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["active"] == 2 and doc["effective_day"] == "2026-04-13"
    assert main(["--config", str(config), "promote", MODEL, "9"]) == 1
    assert "no version 9" in capsys.readouterr().err
    # a promotion not checked yet restarts the charts anyway: nothing to acknowledge
    assert main(["--config", str(config), "ack", MODEL]) == 1
    assert "version 2 takes over on 2026-04-13" in capsys.readouterr().err


@pytest.mark.slow
def test_refit_starts_at_the_estimated_change_and_recommends_promotion(changed: World) -> None:
    last = changed.check(date(2026, 4, 12)).results[0].current
    assert last is not None and last.change_day is not None
    result = refit(changed.settings, MODEL, now=night_after(date(2026, 4, 12)),
                   engine=changed.engine)
    v2 = _versions(changed)[1]
    assert (v2.state, v2.fit_start, v2.fit_end) == ("candidate", last.change_day, date(2026, 4, 11))
    # the scenario's slope went from 2.1 to 2.6 minutes per pallet on 16 March
    assert float(v2.coefficients[1]) == pytest.approx(2.6, abs=0.15)
    assert result.evaluated_as == "refitted"
    assert result.evaluation_window == (v2.fit_start, result.holdout[0] - timedelta(days=1))
    assert result.candidate_score.coverage.coverage > 0.9 > result.active_score.coverage.coverage
    assert result.candidate_score.rmse < result.active_score.rmse
    assert result.recommendation.action == "promote"
    assert result.recommendation.command == f"fitwatch promote {MODEL} 2 --reason \"...\""


# statsmodels OLS as the reference library: the comparison's candidate figures are those of a
# fit on the days before the hold-out only (no held-out row leaks into the candidate's fit).
@pytest.mark.slow
def test_the_candidate_is_judged_without_its_held_out_rows(changed: World) -> None:
    fit_model(changed.settings, FitRequest(MODEL, start=date(2026, 3, 16),
                                           end=date(2026, 4, 11)),
              now=night_after(date(2026, 4, 12)), engine=changed.engine)
    result = compare(changed.settings, MODEL, holdout_days=5, engine=changed.engine)
    assert result.holdout == (date(2026, 4, 7), date(2026, 4, 11))
    with changed.engine.connect() as conn:
        model = get_model(conn, MODEL)
        train = load_observations(conn, model, date(2026, 3, 16), date(2026, 4, 6))
        held = load_observations(conn, model, *result.holdout)
    ref = sm.OLS(train.y, sm.add_constant(train.x)).fit()
    frame = ref.get_prediction(sm.add_constant(held.x)).summary_frame(alpha=0.05)
    inside = (held.y >= frame["obs_ci_lower"]) & (held.y <= frame["obs_ci_upper"])
    assert result.candidate_score.coverage.covered == int(inside.sum())
    residual = held.y - frame["mean"].to_numpy()
    assert result.candidate_score.rmse == pytest.approx(np.sqrt(np.mean(residual**2)), rel=1e-9)


def test_an_unchanged_relationship_is_kept(world: World) -> None:
    world.add_days(date(2026, 3, 9), date(2026, 4, 5), 81, "calm.csv")
    world.check(date(2026, 4, 5))
    fit_model(world.settings, FitRequest(MODEL, start=date(2026, 3, 9), end=date(2026, 4, 5)),
              now=night_after(date(2026, 4, 5)), engine=world.engine)
    result = compare(world.settings, MODEL, engine=world.engine)
    assert result.recommendation.action == "keep"
    assert abs(result.candidate_score.rmse - result.active_score.rmse) < 0.1 * \
        result.active_score.rmse


@pytest.mark.slow
def test_too_few_days_to_judge_means_wait(refitted_from_30_march: World) -> None:
    changed = refitted_from_30_march
    result = compare(changed.settings, MODEL, holdout_days=10, engine=changed.engine)
    assert result.recommendation.action == "wait" and result.active_score is None
    assert "Holding out 10 of the 12 days leaves 2 to refit the candidate on; at least 5" \
        in result.recommendation.sentence  # 5 April had no loads


# A week of days is too short to calibrate a fixed limit; the version self-starts instead
# (the verdict of the window's statistics, whatever database holds the rows: one backend).
@pytest.mark.slow
@pytest.mark.parametrize("backend", ["sqlite"], indirect=True)
def test_a_version_fitted_on_a_week_self_starts(changed: World) -> None:
    refit(changed.settings, MODEL, start=date(2026, 4, 6), engine=changed.engine)
    candidate = _versions(changed)[-1]
    calibration = candidate.baseline.calibration
    assert calibration is not None and calibration.learn_until == 40
    # the known-parameter limit (Quesenberry's Q values are exactly standard normal)
    assert calibration.h == pytest.approx(calibration.h_known) and calibration.draws == 0


def test_refit_needs_a_start_when_no_change_was_estimated(world: World) -> None:
    world.add_days(date(2026, 3, 9), date(2026, 3, 15), 82, "calm.csv")
    world.check(date(2026, 3, 15))
    with pytest.raises(UsageError, match="give the first day of the new window with --start"):
        refit(world.settings, MODEL, engine=world.engine)
    with pytest.raises(StateError, match="no candidate version"):
        compare(world.settings, MODEL, engine=world.engine)


@pytest.mark.slow
def test_refit_and_compare_commands(changed: World, capsys: pytest.CaptureFixture[str]) -> None:
    url = changed.engine.url.render_as_string(hide_password=False)
    config = changed.tmp / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{url}"\n[schedule]\ntimezone = "Europe/Berlin"\n')
    assert main(["--config", str(config), "refit", MODEL, "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["active"]["version"] == 1 and doc["candidate"]["version"] == 2
    assert set(doc["holdout"]["active"]) >= {"n", "coverage", "bias", "rmse"}
    assert doc["recommendation"]["action"] == "promote"
    assert main(["--config", str(config), "compare", MODEL, "--candidate", "2"]) == 0
    text = capsys.readouterr().out
    assert "interval coverage" in text and "recommendation: promote" in text
    assert main(["--config", str(config), "compare", MODEL, "--candidate", "1"]) == 1
    assert "not a candidate" in capsys.readouterr().err


@pytest.mark.slow
def test_a_short_window_version_learns_its_level_and_needs_no_sharpening(
        changed: World) -> None:
    """After a change, a version fitted on two weeks self-starts: its bias chart has the
    known-parameter limit from its first day, learns the level from its in-control days (each
    check records how many), and status has no refit to suggest."""
    fit_model(changed.settings, FitRequest(MODEL, start=date(2026, 3, 16),
                                           end=date(2026, 3, 31)),
              now=night_after(date(2026, 4, 12)), engine=changed.engine)
    promote(changed.settings, MODEL, 2, now=night_after(date(2026, 4, 12)), engine=changed.engine)
    changed.add_days(date(2026, 4, 13), date(2026, 4, 26), 77, "more.csv")
    changed.check(date(2026, 4, 26))
    (status,) = model_statuses(changed.settings, now=night_after(date(2026, 4, 26)),
                               engine=changed.engine)
    v2 = _versions(changed)[1]
    calibration = v2.baseline.calibration
    assert calibration is not None and calibration.learn_until == 40
    assert status.status == "ok" and status.sharpen is None
    with changed.engine.connect() as conn:
        checks = load_checks(conn, get_model(conn, MODEL).id, date(2026, 4, 13))
    learned = [c.state.learning.level.n for c in checks]
    with_rows = [c for c in checks if c.n > 0]
    assert learned == sorted(learned) and learned[-1] == len(with_rows)
    assert all(c.cusum_h == pytest.approx(calibration.h_known) for c in checks)
    # model show and its JSON say how far the learning has come
    view = show_version(changed.settings, MODEL, engine=changed.engine)
    fit_days = v2.baseline.fit_days
    assert (f"learned so far: {fit_days + learned[-1]} of 40 days ({fit_days} fit days and "
            f"{learned[-1]} checked days); learning") in view.text()
    assert view.as_dict()["cusum"]["learned_days"] == learned[-1]
    # ... and so does the within-day slope chart's reference, which learns from the same
    # in-control days (each check records how many)
    # (a day joins it once 14 later days passed without a sign of change; until then it is held)
    slope_days = [c.state.learning.slope_days for c in checks]
    held = len(checks[-1].state.learning.slope_pending)
    assert slope_days == sorted(slope_days) and 0 < slope_days[-1] + held <= len(with_rows)
    assert slope_days[-1] == max(0, slope_days[-1] + held - 14) and held == min(
        14, slope_days[-1] + held)
    chart = view.as_dict()["slope_chart"]
    assert chart["reference"] == "learning" and chart["learned_days"] == slope_days[-1]
    assert chart["held_days"] == held
    assert len(chart["h"]) == 2 and chart["lane_steps"] == [0.10, 0.05]
    assert "(tuned to 10 %), " in view.text() and "(tuned to 5 %);" in view.text()
    assert (f"its reference has learned the slopes of {slope_days[-1]} checked day(s) on top "
            f"of the fit window's, and holds the last {held} back until enough later days pass "
            "without a sign of change; learning") in view.text()


@pytest.mark.slow
def test_asking_to_hold_out_more_days_than_there_are_says_so(
        refitted_from_30_march: World) -> None:
    changed = refitted_from_30_march
    result = compare(changed.settings, MODEL, holdout_days=12, engine=changed.engine)
    assert result.recommendation.action == "wait"
    # the candidate's window reaches the last day, so the 12 held out are cut from it and it is
    # refitted on the days before: the advice counts the days still missing, not "a few"
    fit = changed.settings.check.min_fit_days
    assert result.recommendation.sentence.startswith(
        "There are 12 days with rows in the candidate's window; holding 12 out takes 12 and at "
        f"least {fit} before them to refit the candidate on: {fit} more day(s) with rows.")


@pytest.mark.slow
def test_keep_against_a_standing_refit_says_why_in_the_same_sentence(changed: World) -> None:
    # A candidate fitted across the change (from 2 March, the change was on 16 March) is not
    # clearly better on the held-out days; the monitor still advises a refit, so the advice
    # says why the two disagree and how to fit the candidate instead.
    fit_model(changed.settings, FitRequest(MODEL, start=date(2026, 2, 2), end=date(2026, 4, 12)),
              now=night_after(date(2026, 4, 12)), engine=changed.engine)
    result = compare(changed.settings, MODEL, engine=changed.engine)
    sentence = result.recommendation.sentence
    assert result.recommendation.action == "keep", sentence
    assert sentence.startswith("The monitor advises a refit (since 2026-"), sentence
    assert "mixes both regimes; refit with --start 2026-03-" in sentence
