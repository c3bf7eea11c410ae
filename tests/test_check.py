"""The nightly check end to end on a real database (SQLite always, PostgreSQL when it answers).

Data come from the project's own demo scenario generator (invented, as the demo is); what is
checked are the check's promises: idempotent reruns, late rows handled as if processed in order,
empty days recorded without moving the chart, local calendar days, a clean history staying
``ok`` and a large change caught.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import replace
from datetime import UTC, date, datetime
from pathlib import Path

import pandas as pd
import pytest
from sqlalchemy import Engine

from monitor.config import Settings
from monitor.errors import InputError
from monitor.interface.cli import main
from monitor.monitoring.check import run_checks
from monitor.store.checks import load_checks
from monitor.store.models import get_model
from tests.support.snapshots import WorldCache
from tests.support.world import (
    CALM,
    MODEL,
    World,
    loads_between,
    settings_for,
    write_csv,
)


@pytest.fixture
def world(worlds: WorldCache, engine: Engine, make_settings: Callable[..., Settings],
          tmp_path: Path) -> World:
    """The demo model fitted on the calm history (built once per backend, copied per test)."""
    return worlds.world(engine, settings_for(make_settings, engine), tmp_path, CALM, 7)


def test_rerun_changes_nothing(world: World) -> None:
    world.add_days(date(2026, 3, 9), date(2026, 3, 31), 11, "march.csv")
    first = world.check(date(2026, 3, 31))
    assert first.checks[0].day == date(2026, 3, 8)  # the day after the fit window
    assert first.checks[-1].day == date(2026, 3, 31)
    before = world.stored()
    again = world.check(date(2026, 3, 31))
    assert again.checks == [] and "checked through 2026-03-31" in again.results[0].note
    assert world.stored() == before


def test_empty_days_are_recorded_and_do_not_move_the_chart(world: World) -> None:
    world.add_days(date(2026, 3, 9), date(2026, 3, 16), 12, "week.csv")
    checks = {c.day: c for c in world.check(date(2026, 3, 16)).checks}
    sunday, saturday = checks[date(2026, 3, 15)], checks[date(2026, 3, 14)]
    assert sunday.n == 0 and sunday.coverage is None and sunday.cusum_u is None
    assert (sunday.cusum_upper, sunday.cusum_lower) == (saturday.cusum_upper,
                                                         saturday.cusum_lower)
    assert any("no loads were recorded on 2026-03-15" in r for r in sunday.reasons)


def test_rows_outside_the_fitted_range_are_named_in_the_days_words(world: World,
                                                                   tmp_path: Path) -> None:
    # Before, extrapolated rows were only counted in the JSON. Two loads of 70 pallets lie far
    # above the history's range (the scenario draws up to 33).
    day = loads_between(CALM, date(2026, 3, 9), date(2026, 3, 9), 21)
    day.loc[day.index[:2], "pallets"] = 70
    world.ingest(write_csv(day, tmp_path / "big.csv"), date(2026, 3, 9))
    check = {c.day: c for c in world.check(date(2026, 3, 9)).checks}[date(2026, 3, 9)]
    assert check.extrapolated == 2
    assert any(f"of the {check.n} loads on 2026-03-09 fell inside the 95 % interval (2 of them "
               "lay outside the range the line was fitted on: planned by extending it)" in r
               for r in check.reasons), check.reasons


def test_late_rows_reevaluate_from_their_day_as_if_processed_in_order(
        world: World, engine: Engine, make_settings, tmp_path: Path) -> None:
    full = loads_between(CALM, date(2026, 3, 9), date(2026, 3, 28), 13)
    late_day = full["docked_at"].str.startswith("2026-03-12")
    late = full[late_day].iloc[::2]
    on_time = full.drop(late.index)
    world.ingest(write_csv(on_time, tmp_path / "on_time.csv"), date(2026, 3, 28))
    world.check(date(2026, 3, 20))
    summary = world.ingest(write_csv(late, tmp_path / "late.csv"), date(2026, 3, 28))
    assert summary.accepted == len(late)
    outcome = world.check(date(2026, 3, 28))
    result = outcome.results[0]
    assert result.recomputed_from == date(2026, 3, 12)
    assert result.checks[0].day == date(2026, 3, 12)

    # the same rows, all present before any check, in a second database: identical results
    other = tmp_path / "other"
    other.mkdir()
    from monitor.store.engine import open_engine
    from monitor.store.migrate import upgrade_database
    url = f"sqlite:///{other / 'fitwatch.db'}"
    engine2 = open_engine(url)
    upgrade_database(engine2)
    world2 = World(engine2, settings_for(make_settings, engine2), other)
    world2.ingest(write_csv(full, other / "all.csv"), date(2026, 3, 28))
    world2.check(date(2026, 3, 28))

    def comparable(rows):
        keep = ("day", "n", "covered", "cusum_upper", "cusum_lower", "status",
                "slope_pvalue", "window_coverage", "reasons")
        return [{k: (round(r[k], 9) if isinstance(r[k], float) else r[k]) for k in keep}
                for r in rows]

    assert comparable(world.stored()) == comparable(world2.stored())
    engine2.dispose()


def test_local_calendar_day_decides_where_a_row_belongs(world: World, tmp_path: Path) -> None:
    # Europe/Berlin (the test zone): 23:30 local on 10 March is 22:30 UTC the same day, and
    # 00:30 local on 11 March is 23:30 UTC on 10 March: it belongs to 11 March.
    rows = pd.DataFrame({
        "load_id": ["late-evening", "past-midnight"],
        "docked_at": ["2026-03-10 23:30:00", "2026-03-11 00:30:00"],
        "pallets": [20, 20], "load_minutes": [51.0, 52.0], "door": ["D01", "D02"]})
    world.ingest(write_csv(rows, tmp_path / "edge.csv"), date(2026, 3, 11))
    checks = {c.day: c for c in world.check(date(2026, 3, 11)).checks}
    assert checks[date(2026, 3, 10)].n == 1 and checks[date(2026, 3, 11)].n == 1


def test_clean_history_stays_ok_and_a_large_change_is_caught(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    changing = replace(CALM, layout_change=date(2026, 4, 20), minutes_per_pallet_after=2.6)
    w = World(engine, settings_for(make_settings, engine), tmp_path, scenario=changing, seed=21)
    w.add_days(date(2026, 3, 9), date(2026, 5, 10), 22, "spring.csv")
    checks = w.check(date(2026, 5, 10)).checks
    before = [c for c in checks if c.day < changing.layout_change]
    assert before and all(c.status != "refit" for c in before)
    first_refit = next(c for c in checks if c.status == "refit")
    assert (first_refit.day - changing.layout_change).days <= 4
    last = checks[-1]
    assert last.status == "refit" and last.change_day is not None
    assert abs((last.change_day - changing.layout_change).days) <= 2
    assert any("each pallet now adds" in r.lower() for r in last.reasons)


def test_a_refit_holds_until_released(engine: Engine, make_settings, tmp_path: Path) -> None:
    # A burst of slow loads for a week, then back to normal: the advice stays "refit".
    burst = replace(CALM, minutes_base=30.0)
    w = World(engine, settings_for(make_settings, engine), tmp_path, seed=31)
    w.add_days(date(2026, 3, 9), date(2026, 3, 14), 32, "normal.csv")
    path = write_csv(loads_between(burst, date(2026, 3, 15), date(2026, 3, 21), 33),
                     tmp_path / "b.csv")
    w.ingest(path, date(2026, 3, 21))
    w.add_days(date(2026, 3, 22), date(2026, 4, 4), 34, "after.csv")
    checks = w.check(date(2026, 4, 4)).checks
    first = next(c for c in checks if c.status == "refit")
    later = [c for c in checks if c.day > first.day]
    assert later and all(c.status == "refit" and c.status_since == first.day for c in later)
    # after what it means for plans (when a finding still stands), the advice that holds
    lead = [r for r in later[-1].reasons if not r.startswith("In plan terms: ")]
    assert lead[0].startswith("refit advised since")


def test_check_json_fail_on_and_status_from_the_command_line(
        world: World, capsys: pytest.CaptureFixture[str]) -> None:
    world.add_days(date(2026, 3, 9), date(2026, 3, 20), 41, "days.csv")
    url = world.engine.url.render_as_string(hide_password=False)
    config = world.tmp / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{url}"\n[schedule]\ntimezone = "Europe/Berlin"\n')
    code = main(["--config", str(config), "check", MODEL, "--through", "2026-03-20", "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert code == 0 and len(doc) == 13
    day = doc[-1]
    for key in ("model", "day", "n", "covered", "coverage", "status", "reasons"):
        assert key in day
    assert set(day["cusum"]) >= {"upper", "lower", "h", "signal"}
    assert set(day["slope"]) >= {"statistic", "pvalue"}
    # nothing new, but the current status still decides --fail-on: 3 at or above the threshold
    # (README, "Running it every night": exit codes)
    for threshold, reached in (("watch", ("watch", "refit")), ("refit", ("refit",))):
        code = main(["--config", str(config), "check", "--through", "2026-03-20",
                     "--fail-on", threshold])
        capsys.readouterr()
        assert code == (3 if day["status"] in reached else 0), (threshold, day["status"])
    code = main(["--config", str(config), "status", "--json"])
    status = json.loads(capsys.readouterr().out)[0]
    assert code == 0 and status["last_checked_day"] == "2026-03-20"
    assert set(status) >= {"model", "status", "since", "last_checked_day", "reasons"}
    code = main(["--config", str(config), "model", "show", MODEL, "--json"])
    shown = json.loads(capsys.readouterr().out)
    assert set(shown["coefficients"]) == {"intercept", "pallets"}
    assert shown["version"] == 1 and shown["dof"] == shown["n"] - 2


def test_fail_on_refit_exits_3(engine: Engine, make_settings, tmp_path: Path,
                               capsys: pytest.CaptureFixture[str]) -> None:
    url = engine.url.render_as_string(hide_password=False)
    w = World(engine, settings_for(make_settings, engine), tmp_path, scenario=replace(
        CALM, layout_change=date(2026, 3, 9), minutes_per_pallet_after=3.0), seed=51)
    w.add_days(date(2026, 3, 9), date(2026, 3, 20), 52, "bad.csv")
    config = tmp_path / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{url}"\n[schedule]\ntimezone = "Europe/Berlin"\n')
    assert main(["--config", str(config), "check", "--through", "2026-03-20",
                 "--fail-on", "refit"]) == 3
    assert "REFIT" in capsys.readouterr().out
    assert main(["--config", str(config), "check", "--through", "2026-03-20",
                 "--fail-on", "refit"]) == 3  # still refit on a rerun with nothing new


def test_unknown_model_and_unfitted_model_are_clear_errors(
        world: World, capsys: pytest.CaptureFixture[str]) -> None:
    url = world.engine.url.render_as_string(hide_password=False)
    assert main(["--db", url, "check", "nope"]) == 1
    err = capsys.readouterr().err
    assert "nope" in err and MODEL in err and "Traceback" not in err


def test_checks_are_stored_with_every_figure(world: World) -> None:
    world.add_days(date(2026, 3, 9), date(2026, 3, 31), 61, "march.csv")
    world.check(date(2026, 3, 31))
    with world.engine.connect() as conn:
        model = get_model(conn, MODEL)
        stored = load_checks(conn, model.id)
    last = stored[-1]
    assert last.window_n > 0 and last.wilson_low < last.window_coverage < last.wilson_high
    assert last.cusum_h > 0 and last.slope_pvalue is not None and last.chow_pvalue is not None
    assert last.spread_ratio is not None and last.slope_method in ("slope", "slope-cr1")
    assert last.reasons and all(f.level in ("watch", "refit") for f in last.details.findings)


def test_a_day_that_is_not_over_cannot_be_checked(world: World,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(InputError, match="is not over yet in Europe/Berlin"):
        run_checks(world.settings, [MODEL], day=date(2026, 3, 20),
                   now=datetime(2026, 3, 20, 12, tzinfo=UTC), engine=world.engine)
