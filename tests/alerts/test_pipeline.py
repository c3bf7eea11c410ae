"""The night's alerts over real day checks: the demo scenario's slope change through the
nightly pipeline, a candidate and its promotion, two models with their own recipients, and the
``.eml`` folder used when no SMTP server is configured.

References: README, "Running it every night" (one digest per recipient and night); RFC 5322
(message format, CRLF lines) read back with the Python stdlib ``email`` parser
(``policy.default``).
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import date, timedelta
from email import policy
from email.message import EmailMessage
from email.parser import BytesParser
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import Engine

from monitor.alerts.mailer import DeliveryError, EmlFolderMailer
from monitor.alerts.service import send_night_alerts, send_pending_alerts
from monitor.config import Settings
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.lifecycle.refit import promote
from monitor.store import outbox
from monitor.store.checks import insert_checks, last_check
from monitor.store.models import get_model
from monitor.store.versions import active_version
from tests.support.mail import RecordingMailer, day_check
from tests.support.world import CHANGED, MODEL, WORDS, World, night_after

LEAD = "planning.lead@example.com"
OFFICE = "dock.office@example.com"


def _settings(make_settings: Callable[..., Settings], engine: Engine, tmp: Path,
              models: dict[str, Any] | None = None) -> Settings:
    return make_settings(engine.url.render_as_string(hide_password=False),
                         models=models or WORDS,
                         alerts={"to": [LEAD], "sender": "fitwatch@dc-north.example",
                                 "eml_dir": str(tmp / "mail"), "remind_every_days": 3})


def _days(first: date, last: date) -> list[date]:
    return [first + timedelta(days=i) for i in range((last - first).days + 1)]


def _text(message: EmailMessage) -> str:
    body = message.get_body(("plain",))
    assert body is not None
    return str(body.get_content())


@pytest.mark.slow
def test_slope_change_through_the_nightly_pipeline(engine: Engine, make_settings,
                                                   tmp_path: Path) -> None:
    settings = _settings(make_settings, engine, tmp_path)
    world = World(engine, settings, tmp_path, scenario=CHANGED, seed=71)
    world.add_days(date(2026, 3, 9), date(2026, 4, 14), 72, "spring.csv")
    mailer = RecordingMailer()
    subjects: dict[date, str] = {}

    def night(day: date) -> None:
        world.check(day)
        before = len(mailer.sent)
        send_night_alerts(settings, day, now=night_after(day), engine=engine, mailer=mailer)
        if len(mailer.sent) > before:
            subjects[day] = str(mailer.sent[-1][1]["Subject"])

    for day in _days(date(2026, 3, 8), date(2026, 4, 11)):
        night(day)
    entered = min(d for d, s in subjects.items() if s == "fitwatch: dock_loading needs a refit")
    # at most a watch message before it (the change may show first as watch)
    assert all(s == "fitwatch: dock_loading is on watch" for d, s in subjects.items()
               if d < entered)
    assert len([d for d in subjects if d < entered]) <= 1
    # one reminder every third night after entering, and nothing in between
    assert sorted(d for d in subjects if d >= entered) == _days(entered, date(2026, 4, 11))[::3]
    assert all(s == "fitwatch: reminder, dock_loading still needs a refit"
               for d, s in subjects.items() if d > entered)
    assert "fitwatch refit dock_loading" in _text(mailer.sent[-len([d for d in subjects
                                                                    if d >= entered])][1])

    # a candidate is fitted: the advice becomes the exact promote command
    fit_model(settings, FitRequest(MODEL, start=date(2026, 3, 16), end=date(2026, 4, 11)),
              now=night_after(date(2026, 4, 11)), engine=engine, actor="test")
    night(date(2026, 4, 12))
    promote(settings, MODEL, 2, reason="new dock layout", now=night_after(date(2026, 4, 12)),
            actor="lead", engine=engine)
    night(date(2026, 4, 13))
    restart = mailer.sent[-1][1]
    assert restart["Subject"] == "fitwatch: dock_loading restarted, first day ok"
    text = _text(restart)
    assert "version 2 was promoted by lead (new dock layout)" in text
    assert "first day, 2026-04-13, came out ok" in text
    # the coverage window restarted with version 2: one day, not "the last 14 days"
    assert "inside the interval on the 1 day under version 2 (from 2026-04-13)" in text
    night(date(2026, 4, 14))
    assert date(2026, 4, 14) not in subjects  # all quiet after the promotion


def test_the_promote_command_when_a_candidate_waits(engine: Engine, make_settings,
                                                    tmp_path: Path) -> None:
    settings = _settings(make_settings, engine, tmp_path)
    world = World(engine, settings, tmp_path, scenario=CHANGED, seed=71)
    world.add_days(date(2026, 3, 9), date(2026, 4, 12), 72, "spring.csv")
    world.check(date(2026, 4, 11))
    fit_model(settings, FitRequest(MODEL, start=date(2026, 3, 16), end=date(2026, 4, 11)),
              now=night_after(date(2026, 4, 11)), engine=engine, actor="test")
    world.check(date(2026, 4, 12))
    with engine.connect() as conn:
        last = last_check(conn, get_model(conn, MODEL).id)
    assert last is not None and last.status == "refit"
    # the night is a reminder night only every third day; ask for daily reminders here
    daily = _settings(make_settings, engine, tmp_path,
                      {MODEL: {**WORDS[MODEL], "alerts": {"remind_every_days": 1}}})
    mailer = RecordingMailer()
    send_night_alerts(daily, date(2026, 4, 12), now=night_after(date(2026, 4, 12)), engine=engine,
                      mailer=mailer)
    text = _text(mailer.sent[0][1])
    assert "fitwatch promote dock_loading 2" in text and "fitwatch refit" not in text


def test_two_models_per_model_recipients_and_eml_files(engine: Engine, make_settings,
                                                       tmp_path: Path) -> None:
    models = {MODEL: WORDS[MODEL], "yard_moves": {"alerts": {"to": [LEAD, OFFICE]}}}
    settings = _settings(make_settings, engine, tmp_path, models)
    World(engine, settings, tmp_path)  # dock_loading, and the history file yard_moves uses
    fit_model(settings, FitRequest("yard_moves", tmp_path / "history.csv", "load_minutes",
                                   ("pallets",), "docked_at", "load_id"),
              now=night_after(date(2026, 3, 8)), engine=engine, actor="test")
    night = date(2026, 3, 20)
    with engine.begin() as conn:
        rows = []
        for name, status in ((MODEL, "watch"), ("yard_moves", "refit")):
            model = get_model(conn, name)
            version = active_version(conn, model.id)
            assert version is not None
            rows.append(day_check(night, status, night, model_id=model.id,
                                  version_id=version.id, model=name))
        insert_checks(conn, rows)
    run = send_night_alerts(settings, night, now=night_after(night), engine=engine)
    assert (run.queued, run.sent) == (2, 2) and run.transport.startswith("folder ")
    folder = tmp_path / "mail"
    files = sorted(folder.iterdir())
    assert [f.name for f in files] == [f"night_2026-03-20_{OFFICE}.eml",
                                       f"night_2026-03-20_{LEAD}.eml"]
    parsed = {}
    for f in files:
        raw = f.read_bytes()
        assert raw.count(b"\n") == raw.count(b"\r\n")  # RFC 5322 §2.1: CRLF line ends
        msg = BytesParser(policy=policy.default).parsebytes(raw)
        parsed[str(msg["To"])] = msg
    assert parsed[LEAD]["Subject"] == "fitwatch: news on 2 models (1 refit, 1 watch)"
    lead_text = _text(parsed[LEAD])
    # both models' rows stop with their history (8 March): their data need a look as well
    assert lead_text.index("== yard_moves: refit; data need a look ==") < lead_text.index(
        "== dock_loading: watch; data need a look ==")
    assert parsed[OFFICE]["Subject"] == "fitwatch: yard_moves needs a refit"
    assert "dock_loading" not in _text(parsed[OFFICE])
    # one chart with a pair of panels per model, most pressing first, and it says so
    html = str(parsed[LEAD].get_body(("html",)).get_content())  # type: ignore[union-attr]
    assert "daily coverage of yard_moves (level 95 %), dock_loading (level 95 %)" in html
    image = next(p for p in parsed[LEAD].walk() if p.get_content_type() == "image/png")
    png = image.get_content()
    # PNG IHDR width and height (PNG specification, RFC 2083 §4.1.1): 640 × 360 per model
    assert int.from_bytes(png[16:20], "big") == 640
    assert int.from_bytes(png[20:24], "big") == 720
    again = send_night_alerts(settings, night, now=night_after(night) + timedelta(hours=1),
                              engine=engine)
    assert (again.queued, again.sent) == (0, 0) and sorted(folder.iterdir()) == files
    with engine.connect() as conn:
        assert [r.status for r in outbox.rows(conn)] == ["sent", "sent"]


def test_eml_folder_write_is_atomic_and_idempotent(tmp_path: Path) -> None:
    msg = EmailMessage()
    msg["Subject"] = "fitwatch: dock_loading needs a refit"
    msg.set_content("body")
    mailer = EmlFolderMailer(tmp_path / "new" / "mail")
    mailer.send(msg, key="night/2026-03-20/lead@example.com")
    mailer.send(msg, key="night/2026-03-20/lead@example.com")
    assert [p.name for p in (tmp_path / "new" / "mail").iterdir()] == [
        "night_2026-03-20_lead@example.com.eml"]  # no temporary file left, no second copy
    blocked = tmp_path / "blocked"
    blocked.write_text("a file, not a folder")
    with pytest.raises(DeliveryError, match="cannot write"):
        EmlFolderMailer(blocked).send(msg, key="k")


def test_a_model_checked_after_its_night_was_mailed_gets_its_own_digest(
        engine: Engine, make_settings, tmp_path: Path) -> None:
    """Queueing follows the stored checks: a check stored after the night's digest went out
    (the model failed that night and was checked on a later run) is still news, once."""
    models = {MODEL: WORDS[MODEL], "yard_moves": {}}
    settings = _settings(make_settings, engine, tmp_path, models)
    World(engine, settings, tmp_path)
    fit_model(settings, FitRequest("yard_moves", tmp_path / "history.csv", "load_minutes",
                                   ("pallets",), "docked_at", "load_id"),
              now=night_after(date(2026, 3, 8)), engine=engine, actor="test")
    night = date(2026, 3, 20)

    def store(name: str, status: str) -> None:
        with engine.begin() as conn:
            model = get_model(conn, name)
            version = active_version(conn, model.id)
            assert version is not None
            insert_checks(conn, [day_check(night, status, night, model_id=model.id,
                                           version_id=version.id, model=name)])

    store(MODEL, "watch")
    first = send_pending_alerts(settings, now=night_after(night), engine=engine)
    store("yard_moves", "refit")
    second = send_pending_alerts(settings, now=night_after(night), engine=engine)
    third = send_pending_alerts(settings, now=night_after(night), engine=engine)
    assert (first.queued, second.queued, third.queued) == (1, 1, 0)
    with engine.connect() as conn:
        keys = [r.dedupe_key for r in outbox.rows(conn)]
        subjects = [r.subject for r in outbox.rows(conn)]
    assert keys[0] == f"night/2026-03-20/{LEAD}" and keys[1].startswith("night+")
    assert subjects == ["fitwatch: dock_loading is on watch",
                        "fitwatch: yard_moves needs a refit"]
