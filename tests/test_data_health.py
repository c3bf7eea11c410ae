"""Data health through the real pipeline: a feed that stops, a file rejected whole, a rising
rejection share; shown by status, mailed in the digest and counted by check --fail-on watch.

The world is the demo's dock (tests/support/world.py): fitted on 5 January to 8 March 2026, rows
Monday to Saturday, Sundays closed (invented data from the project's own generator). The
arithmetic of the silence rule is in tests/stats/test_silence.py: after a 9-week fit window a
third silent working day is flagged, a second is not, and a closed Sunday never is.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from datetime import date, timedelta
from email.message import EmailMessage
from pathlib import Path

import pytest
from sqlalchemy import Engine

from monitor.alerts.service import send_night_alerts
from monitor.domain.data_health import DataHealth
from monitor.interface.status import model_statuses
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.lifecycle.refit import promote
from monitor.monitoring.data_health import data_health, model_data_health, prefetch
from monitor.store.models import get_model
from monitor.store.versions import active_version
from tests.support.mail import RecordingMailer
from tests.support.world import (
    CALM,
    MODEL,
    WORDS,
    World,
    loads_between,
    night_after,
    write_csv,
)

LEAD = "planning.lead@example.com"
DEMO_NIGHTS = Path(__file__).resolve().parents[1] / "demo_data" / "nights"


def _world(engine: Engine, make_settings: Callable, tmp_path: Path) -> World:
    url = engine.url.render_as_string(hide_password=False)
    settings = make_settings(url, models=WORDS, alerts={"to": [LEAD]})
    return World(engine, settings, tmp_path)


def _days(first: date, last: date) -> list[date]:
    return [first + timedelta(days=i) for i in range((last - first).days + 1)]


def _night(key: str) -> date:
    return date.fromisoformat(key.split("/")[1])


def _text(message: EmailMessage) -> str:
    body = message.get_body(("plain",))
    assert body is not None
    return str(body.get_content())


def _nights(world: World, first: date, last: date, mailer: RecordingMailer) -> dict[date, bool]:
    """Check, mail and look at the status night by night; which nights had a data finding."""
    found = {}
    for day in _days(first, last):
        world.check(day)
        send_night_alerts(world.settings, day, now=night_after(day), engine=world.engine,
                          mailer=mailer)
        (status,) = model_statuses(world.settings, now=night_after(day), engine=world.engine)
        found[day] = status.data is not None
    return found


def _read_first_agrees(world: World, day: date) -> DataHealth:
    """The findings as of ``day`` read for the model alone, and read first for a whole night
    as the digest reads them (with a model id that has nothing stored), are the same."""
    now = night_after(day)
    with world.engine.connect() as conn:
        model = get_model(conn, MODEL)
        version = active_version(conn, model.id)
        check = world.settings.for_model(MODEL).check
        zone = world.settings.timezone
        alone = model_data_health(conn, model, check, version, through=day, now=now, zone=zone)
        reads = prefetch(conn, [model.id, 987_654], through=day, now=now)
        first = model_data_health(conn, model, check, version, through=day, now=now, zone=zone,
                                  prefetched=reads)
        with pytest.raises(ValueError, match="another day"):
            model_data_health(conn, model, check, version, through=day - timedelta(days=1),
                              now=now, zone=zone, prefetched=reads)
    assert repr(first) == repr(alone)
    return first


# a feed that stops ------------------------------------------------------------------------------
def test_a_feed_that_stops_is_flagged_mailed_and_reminded(engine: Engine, make_settings,
                                                          tmp_path: Path) -> None:
    # before: 'OK ... no repairs were recorded' night after night, and no e-mail at all
    world = _world(engine, make_settings, tmp_path)
    world.add_days(date(2026, 3, 9), date(2026, 3, 10), 44, "two_days.csv")
    mailer = RecordingMailer()
    found = _nights(world, date(2026, 3, 9), date(2026, 3, 23), mailer)
    # Wednesday, Thursday and Friday without rows: flagged on Friday the 13th, and it stands
    assert [d for d, f in found.items() if f] == _days(date(2026, 3, 13), date(2026, 3, 23))
    # mailed when it became a finding, then every remind_every_days (3) nights
    assert [_night(key) for key, _ in mailer.sent] == [
        date(2026, 3, 13), date(2026, 3, 16), date(2026, 3, 19), date(2026, 3, 22)]
    first = mailer.sent[0][1]
    assert first["Subject"] == f"fitwatch: {MODEL}: no rows since 2026-03-10"
    text = _text(first)
    assert f"== {MODEL}: ok; data need a look ==" in text
    assert "its status (ok) judges the days through 2026-03-10" in text
    assert "no rows since 2026-03-10 (3 days through 2026-03-13;" in text
    assert "the monitor has no data to judge the model on" in text
    assert f"fitwatch status {MODEL}" in text
    (status,) = model_statuses(world.settings, now=night_after(date(2026, 3, 23)),
                               engine=engine)
    assert status.status == "ok" and status.data is not None and status.data.silent is not None
    assert _read_first_agrees(world, date(2026, 3, 23)).silent is not None
    assert "the status judges the days through 2026-03-10, the last with rows" in (
        status.sentence())
    assert status.as_dict()["data_health"]["silent"]["flagged_on"] == date(2026, 3, 13)


def test_check_fail_on_watch_counts_a_silent_feed(engine: Engine, make_settings,
                                                  tmp_path: Path, cli) -> None:
    world = _world(engine, make_settings, tmp_path)
    world.add_days(date(2026, 3, 9), date(2026, 3, 10), 44, "two_days.csv")
    code, out, err = cli("check", "--through", "2026-03-12", "--fail-on", "watch")
    assert code == 0 and "data" not in out + err  # two silent working days: plausible
    code, out, err = cli("check", "--through", "2026-03-13", "--fail-on", "watch")
    assert code == 3  # before: 0, the model being "OK"
    assert "now OK since" in out and "! data: no rows since 2026-03-10" in out
    assert err == f"fitwatch: {MODEL}: data: no rows since 2026-03-10\n"
    code, _, _ = cli("check", "--through", "2026-03-14", "--fail-on", "refit")
    assert code == 0  # a data finding counts as watch, not as refit


def test_a_steady_feed_with_closed_sundays_is_never_flagged(engine: Engine, make_settings,
                                                            tmp_path: Path) -> None:
    world = _world(engine, make_settings, tmp_path)
    world.add_days(date(2026, 3, 9), date(2026, 3, 21), 45, "two_weeks.csv")  # to a Saturday
    mailer = RecordingMailer()
    found = _nights(world, date(2026, 3, 9), date(2026, 3, 25), mailer)
    # Sundays (15 and 22 March) stay quiet; the stop after Saturday the 21st is flagged on its
    # third silent working day, Wednesday the 25th
    assert [d for d, f in found.items() if f] == [date(2026, 3, 25)]
    assert [_night(key) for key, _ in mailer.sent] == [date(2026, 3, 25)]


def _silent_days(world: World, first: date, last: date) -> dict[date, bool]:
    """Check night by night; which nights had a silent-feed finding."""
    found = {}
    for day in _days(first, last):
        world.check(day)
        (health,) = data_health(world.settings, now=night_after(day), engine=world.engine)
        found[day] = health.silent is not None
    return found


def test_a_short_fit_window_judges_a_pause_by_the_models_stored_days(
        engine: Engine, make_settings, tmp_path: Path, cli) -> None:
    # before: a version fitted on 11 days had no calendar at all, so a feed that stopped was
    # never flagged (the demo's version 4: 186 silent nights, no finding, --fail-on exited 0)
    world = _world(engine, make_settings, tmp_path)
    world.add_days(date(2026, 3, 9), date(2026, 3, 21), 45, "two_weeks.csv")  # to a Saturday
    world.check(date(2026, 3, 21))
    fit_model(world.settings, FitRequest(MODEL, start=date(2026, 3, 11), end=date(2026, 3, 21)),
              now=night_after(date(2026, 3, 21)), engine=engine, actor="test")
    promote(world.settings, MODEL, 2, now=night_after(date(2026, 3, 21)), actor="test",
            engine=engine)
    # the stored days, 5 January to 21 March (11 weeks, Monday to Saturday), are the calendar:
    # the third silent working day is the first implausible one, a Sunday never counts
    found = _silent_days(world, date(2026, 3, 22), date(2026, 3, 26))
    assert [d for d, f in found.items() if f] == [date(2026, 3, 25), date(2026, 3, 26)]
    code, _, err = cli("check", "--through", "2026-03-26", "--fail-on", "watch")
    assert code == 3 and f"fitwatch: {MODEL}: data: no rows since 2026-03-21\n" in err
    silent = json.loads(cli("status", "--json")[1])[0]["data_health"]["silent"]
    assert silent["calendar"] == "the model's days with rows (2026-01-05 to 2026-03-21)"
    assert silent["flagged_on"] == "2026-03-25"


def test_a_history_under_two_weeks_is_stretched_and_judged_cautiously(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    # nine stored days in all (Monday 9 to Tuesday 17 March, Sunday closed), fitted on all of
    # them: the calendar is stretched to 4-17 March, the five days before the first row counted
    # as days without rows, so Wednesday to Saturday had rows on 1 of 2 days (chance of a silent
    # one 1.5 / 3) and Monday and Tuesday on 2 of 2 (0.5 / 3). The pause from Wednesday the
    # 18th reaches 0.001 only on its seventh working day, Wednesday the 25th (the 9 days
    # unstretched would flag it on Monday the 23rd, its fifth)
    settings = make_settings(engine.url.render_as_string(hide_password=False), models=WORDS)
    world = World(engine, settings, tmp_path, fit=False)
    history = write_csv(loads_between(CALM, date(2026, 3, 9), date(2026, 3, 17), 51),
                        tmp_path / "short.csv")
    fit_model(world.settings, FitRequest(MODEL, history, "load_minutes", ("pallets",),
                                         "docked_at", "load_id"),
              now=night_after(date(2026, 3, 17)), engine=engine, actor="test")
    found = _silent_days(world, date(2026, 3, 18), date(2026, 3, 26))
    assert [d for d, f in found.items() if f] == [date(2026, 3, 25), date(2026, 3, 26)]
    (health,) = data_health(world.settings, now=night_after(date(2026, 3, 26)),
                            engine=engine)
    silent = health.silent
    assert silent is not None and silent.flagged_on == date(2026, 3, 25)
    assert silent.calendar == (
        "the model's days with rows (2026-03-09 to 2026-03-17), stretched to 14 days from "
        "2026-03-04, the earlier ones counted as days without rows")
    # Wednesday 18 to Thursday 26: Wed-Sat, a closed Sunday (2.5 / 3), Monday, Tuesday, then
    # the second Wednesday and Thursday (2.5 / 4 each)
    assert silent.chance == pytest.approx((1.5 / 3) ** 4 * (2.5 / 3) * (0.5 / 3) ** 2
                                          * (2.5 / 4) ** 2, rel=1e-12)


# files rejected whole or mostly -----------------------------------------------------------------
def test_a_file_rejected_whole_reaches_status_the_digest_and_fail_on(
        engine: Engine, make_settings, tmp_path: Path, cli) -> None:
    world = _world(engine, make_settings, tmp_path)
    world.add_days(date(2026, 3, 9), date(2026, 3, 13), 46, "week.csv")
    day = date(2026, 3, 14)
    loads = loads_between(CALM, day, day, 47)
    semi = tmp_path / "loads_2026-03-14.csv"  # saved by a spreadsheet in a German locale
    loads.to_csv(semi, index=False, sep=";", decimal=",")
    summary = world.ingest(semi, day)
    assert summary.rejected_whole and summary.rejected == summary.read == len(loads)
    mailer = RecordingMailer()
    world.check(day)
    send_night_alerts(world.settings, day, now=night_after(day), engine=engine, mailer=mailer)
    ((key, message),) = mailer.sent
    assert _night(key) == day
    assert message["Subject"] == f"fitwatch: {MODEL}: {semi.name} rejected whole"
    text = " ".join(_text(message).split())
    first = loads.iloc[0]
    minutes = f"{first['load_minutes']:.1f}".replace(".", ",")
    assert f"was rejected whole: all {len(loads)} rows are bad — {len(loads)} not a number" in text
    assert f"e.g. line 2: load_minutes is '{minutes}', not a number" in text
    assert f"{first['load_id']};{first['docked_at']};{first['pallets']};{minutes}" in text
    # the next night says nothing more about it (it was news once)
    world.add_days(date(2026, 3, 16), date(2026, 3, 16), 48, "monday.csv")
    for night in (date(2026, 3, 15), date(2026, 3, 16)):
        world.check(night)
        send_night_alerts(world.settings, night, now=night_after(night), engine=engine,
                          mailer=mailer)
    assert len(mailer.sent) == 1
    (status,) = model_statuses(world.settings, now=night_after(date(2026, 3, 16)), engine=engine)
    assert status.data is not None and [f.whole for f in status.data.bad_files] == [True]
    assert "rejected whole" in status.sentence()
    (health,) = data_health(world.settings, now=night_after(date(2026, 3, 16)), engine=engine)
    assert health.stands
    assert _read_first_agrees(world, date(2026, 3, 16)).stands
    # the corrected file under the same name clears the finding
    loads.to_csv(semi, index=False)
    world.ingest(semi, date(2026, 3, 16))
    (health,) = data_health(world.settings, now=night_after(date(2026, 3, 16)), engine=engine)
    assert not health.stands
    # and a week later it would have aged out anyway
    loads.head(10).to_csv(tmp_path / "other.csv", index=False, sep=";", decimal=",")
    world.ingest(tmp_path / "other.csv", date(2026, 3, 16))
    (health,) = data_health(world.settings, now=night_after(date(2026, 3, 16)), engine=engine)
    assert health.bad_files and health.bad_files[0].source.endswith("other.csv")
    (later,) = data_health(world.settings, now=night_after(date(2026, 3, 24)), engine=engine)
    assert not later.bad_files


def test_a_file_that_lost_most_of_its_rows_is_a_finding(engine: Engine, make_settings,
                                                        tmp_path: Path) -> None:
    world = _world(engine, make_settings, tmp_path)
    day = date(2026, 3, 9)
    loads = loads_between(CALM, day, day, 49).astype(object)
    loads.loc[: int(len(loads) * 0.6), "pallets"] = "n/a"
    path = tmp_path / "monday.csv"
    loads.to_csv(path, index=False)
    summary = world.ingest(path, day)
    assert not summary.rejected_whole and summary.accepted > 0
    (health,) = data_health(world.settings, now=night_after(day), engine=engine)
    (bad,) = health.bad_files
    assert not bad.whole and bad.bad == summary.rejected and bad.read == len(loads)
    assert f"lost most of its rows: {bad.bad} of {bad.read} rejected" in bad.sentence()
    assert "e.g. line 2: pallets is 'n/a', not a number" in bad.sentence()


# a rising rejection share -----------------------------------------------------------------------
def _with_bad_rows(world: World, day: date, share: float, seed: int) -> None:
    loads = loads_between(CALM, day, day, seed).astype(object)
    if loads.empty:
        return
    bad = round(share * len(loads))
    if bad:
        loads.loc[: bad - 1, "load_minutes"] = "—"
    path = world.tmp / f"loads_{day}.csv"
    loads.to_csv(path, index=False)
    world.ingest(path, day)


def test_a_rising_rejection_share_is_a_finding(engine: Engine, make_settings,
                                               tmp_path: Path) -> None:
    world = _world(engine, make_settings, tmp_path)
    for i, day in enumerate(_days(date(2026, 3, 9), date(2026, 3, 28))):  # 2 rows every other day
        _with_bad_rows(world, day, 0.025 if i % 2 else 0.0, 60 + i)
    (quiet,) = data_health(world.settings, now=night_after(date(2026, 3, 28)), engine=engine)
    assert not quiet.stands and not _read_first_agrees(world, date(2026, 3, 28)).stands
    for i, day in enumerate(_days(date(2026, 3, 30), date(2026, 4, 4))):  # then 1 in 10
        _with_bad_rows(world, day, 0.10, 90 + i)
    (health,) = data_health(world.settings, now=night_after(date(2026, 4, 4)), engine=engine)
    rising = health.rising
    assert rising is not None and not health.bad_files and health.silent is None
    assert _read_first_agrees(world, date(2026, 4, 4)).rising is not None
    assert 0.08 < rising.recent_share < 0.11 and 0.002 < rising.past_share < 0.01
    assert rising.pvalue < 1e-10
    assert rising.reasons[0].code == "not_a_number"
    assert "more rows rejected than usual: " in rising.sentence()
    assert "load_minutes is '—', not a number" in rising.sentence()


def test_an_imported_version_is_judged_by_its_own_days(cli, tmp_path: Path) -> None:
    # an imported version's fit window is not in the database; its own days with rows are
    # the calendar: 9 to 28 March, Monday to Saturday, three of each (0.5 / 4 for a silent
    # working day), so the fourth silent working day is the first implausible one
    doc = {"response": "load_minutes", "predictors": ["pallets"], "time_column": "docked_at",
           "id_column": "load_id", "s": 5.6, "dof": 3800, "fit_end": "2026-03-08",
           "coefficients": {"intercept": 9.0, "pallets": 2.1}}
    (tmp_path / "v.json").write_text(json.dumps(doc))
    assert cli("model", "import", MODEL, str(tmp_path / "v.json"))[0] == 0
    nights = sorted(DEMO_NIGHTS.glob("loads_2026-03-*.csv"))
    assert cli("ingest", MODEL, *(str(p) for p in nights if p.name < "loads_2026-03-29"))[0] == 0
    assert cli("check", "--through", "2026-04-01")[0] == 0
    assert json.loads(cli("status", "--json")[1])[0]["data_health"] is None
    code, _, err = cli("check", "--through", "2026-04-02", "--fail-on", "watch")
    assert code == 3 and f"fitwatch: {MODEL}: data: no rows since 2026-03-28\n" in err
    code, out, _ = cli("status", "--json")
    silent = json.loads(out)[0]["data_health"]["silent"]
    assert silent["calendar"] == "version 1's days so far (2026-03-09 to 2026-03-28)"
    assert silent["flagged_on"] == "2026-04-02"
