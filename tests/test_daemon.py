"""The nightly run and the daemon: inbox, catch-up, failures, the lease, signals, lateness."""

from __future__ import annotations

import email
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from dataclasses import replace
from datetime import UTC, date, datetime, timedelta
from email import policy
from pathlib import Path

import pytest
from sqlalchemy import Engine, select

from monitor.config import Settings
from monitor.interface.cli import main
from monitor.interface.status import model_statuses
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.monitoring.check import run_checks
from monitor.runtime.daemon import run_daemon
from monitor.runtime.nightly import run_night
from monitor.runtime.schedule import last_scheduled, nightly_state
from monitor.store import audit, lease
from monitor.store.checks import last_check
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from monitor.store.models import get_model
from monitor.store.schema import scheduler_lease
from tests.support.mail import RecordingMailer
from tests.support.world import (
    CALM,
    CHANGED,
    HISTORY,
    MODEL,
    WORDS,
    World,
    loads_between,
    night_after,
    write_csv,
)

TTL = timedelta(minutes=10)
T0 = datetime(2026, 4, 1, 1, 0, tzinfo=UTC)


def _settings(make_settings, engine: Engine, tmp: Path, **extra) -> Settings:
    url = engine.url.render_as_string(hide_password=False)
    return make_settings(url, models=WORDS, ingest={"inbox": str(tmp / "inbox")},
                         alerts={"to": ["lead@example.com"], "eml_dir": str(tmp / "mail")},
                         **extra)


def _world(engine: Engine, make_settings, tmp: Path, scenario=CALM) -> World:
    return World(engine, _settings(make_settings, engine, tmp), tmp, scenario=scenario, seed=5)


def _drop(world: World, first: date, last: date, seed: int, name: str) -> Path:
    folder = world.tmp / "inbox" / MODEL
    folder.mkdir(parents=True, exist_ok=True)
    return write_csv(loads_between(world.scenario, first, last, seed), folder / name)


# the lease -------------------------------------------------------------------------------------
def test_the_lease_has_one_holder_until_it_expires_or_is_released(engine: Engine) -> None:
    assert lease.try_acquire(engine, "a", T0, TTL)
    assert not lease.try_acquire(engine, "b", T0 + timedelta(minutes=5), TTL)
    assert lease.renew(engine, "a", T0 + timedelta(minutes=5), TTL)  # now valid to 00:15
    assert not lease.try_acquire(engine, "b", T0 + timedelta(minutes=14), TTL)
    assert lease.try_acquire(engine, "b", T0 + timedelta(minutes=16), TTL)  # a went silent
    assert not lease.renew(engine, "a", T0 + timedelta(minutes=17), TTL)  # a learns it lost
    lease.release(engine, "b")
    assert lease.try_acquire(engine, "a", T0 + timedelta(minutes=18), TTL)
    with engine.connect() as conn:
        assert lease.read(conn).holder == "a"


# one night -------------------------------------------------------------------------------------
def test_a_night_sweeps_the_inbox_checks_and_files_everything_away(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    world = _world(engine, make_settings, tmp_path)
    good = _drop(world, date(2026, 3, 9), date(2026, 3, 15), 21, "week.csv")
    bad = good.with_name("broken.csv")
    bad.write_text("load_id,pallets\n1,3\n")
    (tmp_path / "inbox" / "no_such_model").mkdir()
    (tmp_path / "inbox" / "no_such_model" / "x.csv").write_text("a\n1\n")
    (good.parent / "half.csv.part").write_text("load_id\n")  # still being written
    run = run_night(world.settings, engine, now=night_after(date(2026, 3, 15)))
    assert run.status == "ok" and not run.stopped
    assert [(f.path.parent.name, f.outcome) for f in run.sweep.files] == [
        ("archive", "archived"), ("rejected", "rejected")]  # oldest first
    assert (good.parent / "archive" / "week.csv").exists() and not good.exists()
    reason = (good.parent / "rejected" / "broken.csv.reason.txt").read_text()
    assert "load_minutes" in reason and "docked_at" in reason  # the missing columns, named
    assert (good.parent / "half.csv.part").exists()
    assert run.sweep.unknown_folders == ("no_such_model",)
    assert [c.day for c in run.checks.checks][-1] == date(2026, 3, 15)
    # a second night with nothing new changes nothing and sends nothing
    again = run_night(world.settings, engine, now=night_after(date(2026, 3, 15)))
    assert not again.sweep.files and not again.checks.checks


def test_a_machine_off_for_weeks_catches_up_and_reports_each_night_once(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    # four weeks off, inside a catch-up horizon of 31 nights: every night is mailed
    settings = _settings(make_settings, engine, tmp_path)
    settings = replace(settings, alerts=replace(settings.alerts, catch_up_nights=31))
    world = World(engine, settings, tmp_path, scenario=CHANGED, seed=5)
    _drop(world, date(2026, 3, 9), date(2026, 4, 5), 22, "weeks.csv")
    run = run_night(world.settings, engine, now=night_after(date(2026, 4, 5)))
    checked = [c.day for c in run.checks.checks]
    assert checked[0] == date(2026, 3, 8) and checked[-1] == date(2026, 4, 5)
    assert list(run.nights) == sorted(set(checked))  # every night's news was considered
    mails = sorted((tmp_path / "mail").glob("*.eml"))
    assert run.alerts.queued == run.alerts.sent == len(mails)
    assert mails, "the slope change reached refit: the lead hears of it"
    subjects = [email.message_from_bytes(p.read_bytes(), policy=policy.default)["Subject"]
                for p in mails]
    assert sum("needs a refit" in s and "reminder" not in s for s in subjects) == 1
    assert run_night(world.settings, engine, now=night_after(date(2026, 4, 5))).alerts.queued == 0


def test_nights_past_the_catch_up_horizon_are_recorded_and_said_once_not_mailed(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    # the same four weeks with the default horizon of 14 nights: the 15 nights before
    # 2026-03-23 get no message; the refit that began among them is news on the first mailed
    # night (the lead never heard of it), and that message says what was left out
    world = _world(engine, make_settings, tmp_path, scenario=CHANGED)
    assert world.settings.alerts.catch_up_nights == 14
    _drop(world, date(2026, 3, 9), date(2026, 4, 5), 22, "weeks.csv")
    run = run_night(world.settings, engine, now=night_after(date(2026, 4, 5)))
    assert run.status == "ok" and run.nights[0] == date(2026, 3, 23)
    messages = [email.message_from_bytes(p.read_bytes(), policy=policy.default)
                for p in sorted((tmp_path / "mail").glob("*.eml"))]
    assert run.alerts.queued == run.alerts.sent == len(messages)
    texts = [m.get_body(preferencelist=("plain",)).get_content() for m in messages]
    nights = sorted(t.splitlines()[0] for t in texts)
    assert nights[0] == "fitwatch, night of 2026-03-23"  # nothing before the horizon
    first = next(t for t in texts if t.startswith("fitwatch, night of 2026-03-23"))
    assert "15 nights (2026-03-08 to 2026-03-22) were stored without a message" in first
    assert "needs a refit since 2026-03-" in first
    assert sum("were stored without a message" in t for t in texts) == 1
    subjects = [m["Subject"] for m in messages]
    assert sum("needs a refit" in s and "reminder" not in s for s in subjects) == 1
    # every night is recorded as seen: nothing is left for a later run
    assert run_night(world.settings, engine, now=night_after(date(2026, 4, 5))).alerts.queued == 0


def test_one_models_failure_is_recorded_and_the_others_are_checked(
        engine: Engine, make_settings, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    world = _world(engine, make_settings, tmp_path)
    history = write_csv(loads_between(CALM, *HISTORY, 9), tmp_path / "second.csv")
    fit_model(world.settings, FitRequest("yard_moves", history, "load_minutes", ("pallets",),
                                         "docked_at", "load_id"),
              now=night_after(HISTORY[1]), engine=engine)
    import monitor.runtime.nightly as nightly

    real = nightly.run_checks

    def flaky(settings, names, **kw):
        if names == ["dock_loading"]:
            raise RuntimeError("disk on fire")
        return real(settings, names, **kw)

    monkeypatch.setattr(nightly, "run_checks", flaky)
    run = run_night(world.settings, engine, now=night_after(date(2026, 3, 12)))
    assert run.status == "partial"
    assert [r.model for r in run.failures] == ["dock_loading"]
    assert "disk on fire" in run.failures[0].error
    with engine.connect() as conn:
        assert last_check(conn, get_model(conn, "yard_moves").id).day == date(2026, 3, 12)
        logged = audit.entries(conn, get_model(conn, MODEL).id, ("failure",))
    assert logged and "disk on fire" in logged[0].details["error"]


def test_a_stop_request_ends_the_run_between_models(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    world = _world(engine, make_settings, tmp_path)
    fit_model(world.settings, FitRequest("yard_moves", write_csv(loads_between(CALM, *HISTORY, 9),
                                                              tmp_path / "second.csv"),
                                         "load_minutes", ("pallets",), "docked_at", "load_id"),
              now=night_after(HISTORY[1]), engine=engine)
    asked = iter([False, True])
    run = run_night(world.settings, engine, now=night_after(date(2026, 3, 12)),
                    should_stop=lambda: next(asked, True))
    assert run.stopped and run.status == "stopped"
    assert [r.model for r in run.checks.results] == ["dock_loading"]


# the daemon ----------------------------------------------------------------------------------
def test_daemon_once_runs_one_night_and_releases_the_lease(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    world = _world(engine, make_settings, tmp_path)
    _drop(world, date(2026, 3, 9), date(2026, 3, 11), 23, "days.csv")
    runs = run_daemon(world.settings, engine=engine, once=True, install_signals=False,
                      holder="test")
    assert len(runs) == 1 and runs[0].status == "ok"
    with engine.connect() as conn:
        state = lease.read(conn)
    assert state.holder is None and state.last_run_status == "ok"
    assert state.last_run_finished_at >= state.last_run_started_at
    # another holder keeps the lease (the database's on SQLite, this host's on PostgreSQL):
    # --once refuses instead of waiting
    assert lease.try_acquire(engine, "other", datetime.now(UTC), TTL, lease.nightly_name(engine))
    config = tmp_path / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{engine.url.render_as_string(hide_password=False)}"\n')
    assert main(["--config", str(config), "daemon", "--once"]) == 1


def _daemon_script(config: Path, holder: str) -> list[str]:
    code = ("import logging, sys; from datetime import timedelta;"
            "from monitor.config import load_settings;"
            "from monitor.runtime.daemon import run_daemon;"
            "logging.basicConfig(level=logging.INFO);"
            f"run_daemon(load_settings({str(config)!r}), holder={holder!r},"
            " ttl=timedelta(seconds=2), poll_seconds=0.2)")
    return [sys.executable, "-c", code]


def _lease(engine: Engine):
    with engine.connect() as conn:
        return conn.execute(select(scheduler_lease)).mappings().first()


def _wait(predicate, timeout: float = 60.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return
        time.sleep(0.1)
    raise AssertionError("timed out")


@pytest.mark.slow
def test_sigterm_stops_the_daemon_cleanly_and_a_waiting_second_instance_takes_over(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    world = _world(engine, make_settings, tmp_path)
    world.add_days(date(2026, 3, 9), date(2026, 3, 11), 24, "days.csv")
    config = tmp_path / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{engine.url.render_as_string(hide_password=False)}"\n'
                      '[schedule]\ncron = "0 3 1 1 *"\ntimezone = "Europe/Berlin"\n')
    env = {**os.environ, "PYTHONWARNINGS": "error"}
    first_log = tmp_path / "first.log"
    with first_log.open("w") as log_file:  # files, not pipes: a full pipe would block it
        first = subprocess.Popen(_daemon_script(config, "first"), env=env,
                                 stdout=subprocess.DEVNULL, stderr=log_file, text=True)
    second = None
    try:
        _wait(lambda: (row := _lease(engine)) is not None and row["holder"] == "first"
              and row["last_run_finished_at"] is not None)
        log_path = tmp_path / "second.log"
        with log_path.open("w") as log_file:
            second = subprocess.Popen(_daemon_script(config, "second"), env=env,
                                      stdout=subprocess.DEVNULL, stderr=log_file, text=True)
        _wait(lambda: "waiting for the lease held by first" in log_path.read_text())
        assert second.poll() is None and _lease(engine)["holder"] == "first"  # it waits
        first_run = _lease(engine)["last_run_finished_at"]
        first.send_signal(signal.SIGTERM)
        assert first.wait(timeout=60) == 0
        _wait(lambda: (row := _lease(engine))["holder"] == "second"
              and row["last_run_finished_at"] > first_run and row["last_run_status"] == "ok")
        second.send_signal(signal.SIGTERM)
        assert second.wait(timeout=60) == 0
        assert _lease(engine)["holder"] is None
        assert "Traceback" not in log_path.read_text()
        assert "first stopped and released the lease" in first_log.read_text()
    finally:
        for proc in (first, second):
            if proc is not None and proc.poll() is None:
                proc.kill()
                proc.wait()


# lateness --------------------------------------------------------------------------------------
def test_last_scheduled_time_follows_the_cron_in_the_configured_zone(make_settings) -> None:
    settings = make_settings("sqlite://", schedule={"cron": "30 2 * * *",
                                                    "timezone": "Europe/Berlin"})
    from monitor.runtime.schedule import cron_trigger

    now = datetime(2026, 3, 29, 6, 0, tzinfo=UTC)  # the night the clocks went forward
    due = last_scheduled(cron_trigger(settings), now - timedelta(days=2), now)
    # 02:30 does not exist in Berlin on 29 March 2026; APScheduler fires at the next valid
    # wall time (03:30 CEST = 01:30 UTC); common practice for cron-like schedulers, no source
    assert due is not None and due.astimezone(UTC) <= now
    assert due.astimezone(UTC).date() == date(2026, 3, 29)


def test_status_says_when_the_nightly_run_is_late(engine: Engine, make_settings,
                                                 tmp_path: Path) -> None:
    settings = _settings(make_settings, engine, tmp_path,
                         schedule={"cron": "30 2 * * *", "timezone": "Europe/Berlin"})
    World(engine, settings, tmp_path)
    started = datetime(2026, 4, 1, 0, 30, tzinfo=UTC)  # 02:30 Berlin (CEST)
    assert lease.try_acquire(engine, "d", started, TTL)
    lease.run_started(engine, "d", started)
    lease.run_finished(engine, "d", started + timedelta(minutes=2), "ok")
    lease.release(engine, "d")
    with engine.connect() as conn:
        state = lease.read(conn)
    on_time = nightly_state(settings, state, datetime(2026, 4, 1, 8, 0, tzinfo=UTC))
    assert not on_time.late and not on_time.daemon_alive
    late = nightly_state(settings, state, datetime(2026, 4, 3, 8, 0, tzinfo=UTC))
    assert late.late and late.due.date() == date(2026, 4, 3)
    assert late.sentence().startswith("LATE: the nightly run due 2026-04-03 02:30")
    statuses = model_statuses(settings, now=datetime(2026, 4, 3, 8, 0, tzinfo=UTC),
                              engine=engine)
    assert statuses[0].nightly is not None and statuses[0].as_dict()["nightly"]["late"]


def test_checks_made_by_hand_and_by_the_night_agree(engine: Engine, make_settings,
                                                   tmp_path: Path) -> None:
    """The nightly run is only a caller of the same check: the same rows, checked by hand in a
    second database (SQLite), give the same verdicts day by day."""
    world = _world(engine, make_settings, tmp_path, scenario=CHANGED)
    dropped = _drop(world, date(2026, 3, 9), date(2026, 3, 25), 25, "weeks.csv")
    kept = shutil.copyfile(dropped, tmp_path / "the_same_rows.csv")  # the inbox file moves
    run = run_night(world.settings, engine, now=night_after(date(2026, 3, 25)))
    again = run_checks(world.settings, [MODEL], through=date(2026, 3, 25),
                       now=night_after(date(2026, 3, 25)), engine=engine)
    assert not again.checks  # the night left nothing to do

    other = tmp_path / "by_hand"
    other.mkdir()
    second = open_engine(f"sqlite:///{other / 'fitwatch.db'}")
    try:
        upgrade_database(second)
        hand = _world(second, make_settings, other, scenario=CHANGED)
        hand.ingest(kept, date(2026, 3, 25))
        by_hand = hand.check(date(2026, 3, 25)).checks
    finally:
        second.dispose()

    def verdicts(checks):
        return [(c.day, c.n, c.covered, c.status, c.status_since, c.reasons,
                 round(c.cusum_upper, 9), round(c.cusum_lower, 9)) for c in checks]

    assert len(run.checks.checks) == 18  # 8 March (the day after the fit window) to 25 March
    assert any(c.status != "ok" for c in run.checks.checks)  # the slope change of 16 March
    assert verdicts(by_hand) == verdicts(run.checks.checks)


# the SQL source --------------------------------------------------------------------------------
def _erp(tmp: Path, first: date, last: date, seed: int) -> str:
    """Another database holding the loads, as a planning system's export table would."""
    from sqlalchemy import create_engine

    url = f"sqlite:///{tmp / 'erp.db'}"
    erp = create_engine(url)
    frame = loads_between(CALM, first, last, seed)
    frame["docked_at"] = frame["docked_at"].astype(str)
    frame.to_sql("loads", erp, index=False, if_exists="append")
    erp.dispose()
    return url


def _with_source(make_settings, engine: Engine, tmp: Path, url: str) -> Settings:
    models = {MODEL: {**WORDS[MODEL], "source": {
        "url": url, "query": "SELECT load_id, docked_at, pallets, load_minutes FROM loads"}}}
    return make_settings(engine.url.render_as_string(hide_password=False), models=models,
                         alerts={"to": ["lead@example.com"], "eml_dir": str(tmp / "mail")})


def test_the_night_pulls_rows_from_the_models_sql_source(engine: Engine, make_settings,
                                                         tmp_path: Path) -> None:
    url = _erp(tmp_path, date(2026, 3, 9), date(2026, 3, 14), 41)
    world = World(engine, _with_source(make_settings, engine, tmp_path, url), tmp_path)
    run = run_night(world.settings, engine, now=night_after(date(2026, 3, 14)))
    assert run.status == "ok" and run.sources[0].accepted > 300
    assert [c.day for c in run.checks.checks][-1] == date(2026, 3, 14)
    again = run_night(world.settings, engine, now=night_after(date(2026, 3, 14)))
    assert again.sources[0].accepted == 0 and not again.checks.checks


def test_a_source_that_is_down_is_recorded_and_the_stored_days_are_still_checked(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    settings = _with_source(make_settings, engine, tmp_path,
                            f"sqlite:///{tmp_path / 'missing' / 'erp.db'}")
    world = World(engine, settings, tmp_path)
    world.add_days(date(2026, 3, 9), date(2026, 3, 10), 42, "days.csv")
    run = run_night(settings, engine, now=night_after(date(2026, 3, 10)))
    assert run.status == "partial" and "dock_loading source" in run.problems[0]
    assert [c.day for c in run.checks.checks][-1] == date(2026, 3, 10)
    with engine.connect() as conn:
        logged = audit.entries(conn, get_model(conn, MODEL).id, ("failure",))
    assert logged[0].details["stage"] == "source"


def test_ingest_source_command(engine: Engine, make_settings, tmp_path: Path,
                               capsys: pytest.CaptureFixture[str]) -> None:
    url = _erp(tmp_path, date(2026, 3, 9), date(2026, 3, 10), 43)
    World(engine, _settings(make_settings, engine, tmp_path), tmp_path)
    config = tmp_path / "fitwatch.toml"
    db = engine.url.render_as_string(hide_password=False)
    config.write_text(f'[database]\nurl = "{db}"\n[schedule]\ntimezone = "Europe/Berlin"\n'
                      f'[models.{MODEL}.source]\nurl_env = "FITWATCH_TEST_ERP_URL"\n'
                      'query = "SELECT * FROM loads"\n')
    assert main(["--config", str(config), "ingest", MODEL, "--source"]) == 1
    assert "FITWATCH_TEST_ERP_URL" in capsys.readouterr().err  # not set yet
    os.environ["FITWATCH_TEST_ERP_URL"] = url
    try:
        assert main(["--config", str(config), "ingest", MODEL, "--source", "--json"]) == 0
        assert json.loads(capsys.readouterr().out)["accepted"] > 100
        assert main(["--config", str(config), "ingest", MODEL, "--source"]) == 0
        assert "nothing changed" in capsys.readouterr().out
    finally:
        del os.environ["FITWATCH_TEST_ERP_URL"]
    assert main(["--config", str(config), "ingest", MODEL]) == 1
    assert "either files" in capsys.readouterr().err


def test_status_asks_whether_data_still_arrive_after_quiet_days(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    world = _world(engine, make_settings, tmp_path)
    world.add_days(date(2026, 3, 9), date(2026, 3, 10), 44, "days.csv")
    world.check(date(2026, 3, 12))
    (two,) = model_statuses(world.settings, now=night_after(date(2026, 3, 12)), engine=engine)
    assert two.last_rows_day == date(2026, 3, 10) and "no rows since" not in two.sentence()
    world.check(date(2026, 3, 13))
    (three,) = model_statuses(world.settings, now=night_after(date(2026, 3, 13)), engine=engine)
    # Wednesday to Friday: three working days without rows after a 9-week fit window with
    # rows on every working day (tests/stats/test_silence.py has the arithmetic)
    assert three.data is not None and three.data.silent is not None
    assert three.data.silent.flagged_on == date(2026, 3, 13)
    assert "no rows since 2026-03-10 (3 days through 2026-03-13;" in three.sentence()
    assert "the monitor has no data to judge the model on" in three.sentence()


def test_alerts_that_cannot_go_out_are_recorded_and_kept_for_later(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    url = engine.url.render_as_string(hide_password=False)
    smtp = {"host": "localhost", "port": 2525, "username": "night",
            "password_env": "FITWATCH_TEST_UNSET_PASSWORD"}
    settings = make_settings(url, models=WORDS, alerts={"to": ["lead@example.com"],
                                                        "smtp": smtp})
    world = World(engine, settings, tmp_path, scenario=CHANGED, seed=5)
    world.add_days(date(2026, 3, 9), date(2026, 3, 31), 45, "weeks.csv")
    run = run_night(settings, engine, now=night_after(date(2026, 3, 31)))
    assert run.status == "partial" and run.problems[0].startswith("alerts:")
    assert "FITWATCH_TEST_UNSET_PASSWORD" in run.problems[0]  # names where, never a value
    assert run.checks.checks[-1].day == date(2026, 3, 31)  # the checks are kept
    with engine.connect() as conn:
        pending = conn.execute(select(scheduler_lease.c.name)).all()  # no lease: not a daemon
        from monitor.store import outbox
        queued = outbox.rows(conn, "pending")
    assert not pending and queued  # the refit news waits in the outbox for a later run
    # the password is fixed (here: a mailer that records): a later run sends each message once
    mailer = RecordingMailer()
    later = run_night(settings, engine, now=night_after(date(2026, 3, 31)) + timedelta(hours=1),
                      mailer=mailer)
    assert later.status == "ok" and later.alerts.sent == len(queued) == len(mailer.sent)
    again = run_night(settings, engine, now=night_after(date(2026, 3, 31)) + timedelta(hours=2),
                      mailer=mailer)
    assert again.alerts.sent == 0 and len(mailer.sent) == len(queued)
