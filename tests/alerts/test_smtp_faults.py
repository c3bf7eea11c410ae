"""A mail server that misbehaves (aiosmtpd on loopback, scripted faults): nothing is dropped
silently, nothing arrives twice except where SMTP itself allows it.

References: RFC 5321 §4.2.1 (2yz accepted, 4yz transient, 5yz permanent), §4.5.4.1 (retry for
at least 4-5 days), §4.1.1.4 and §6.1 (a message whose final reply is lost may be delivered
twice: the one duplicate SMTP allows; both copies carry the same Message-ID, RFC 5322 §3.6.4).
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, date, datetime, timedelta
from email import policy
from email.parser import BytesParser
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import Engine

from monitor.alerts.service import send_due, send_night_alerts
from monitor.config import Settings
from monitor.interface.cli import main
from monitor.interface.status import model_statuses
from monitor.store import outbox
from monitor.store.checks import insert_checks
from monitor.store.models import get_model
from monitor.store.versions import active_version
from tests.support.mail import StartServer, day_check
from tests.support.world import MODEL, WORDS, World, night_after

NIGHT = date(2026, 3, 20)
LEAD = "planning.lead@example.com"


def _world(engine: Engine, make_settings: Callable[..., Settings], tmp: Path,
           port: int) -> World:
    smtp = {"host": "127.0.0.1", "port": port, "security": "none", "timeout_seconds": 5.0}
    settings = make_settings(engine.url.render_as_string(hide_password=False), models=WORDS,
                             alerts={"to": [LEAD], "sender": "fitwatch@dc-north.example",
                                     "smtp": smtp})
    world = World(engine, settings, tmp)
    _store(world, NIGHT - timedelta(days=1), "ok")
    _store(world, NIGHT, "watch")
    (tmp / "fitwatch.toml").write_text(
        f'[database]\nurl = "{engine.url.render_as_string(hide_password=False)}"\n'
        '[schedule]\ntimezone = "Europe/Berlin"\n'
        f'[alerts]\nto = ["{LEAD}"]\nsender = "fitwatch@dc-north.example"\n'
        f'[alerts.smtp]\nhost = "127.0.0.1"\nport = {port}\nsecurity = "none"\n')
    return world


def _store(world: World, day: date, status: str) -> None:
    with world.engine.begin() as conn:
        model = get_model(conn, MODEL)
        version = active_version(conn, model.id)
        assert version is not None
        # revision 0: these days have no stored rows (a check that saw rows of a day which
        # has none now is stale, and the next check would redo it)
        insert_checks(conn, [day_check(day, status, day, model_id=model.id,
                                       version_id=version.id, stats_revision=0)])


def _rows(engine: Engine) -> list[outbox.OutboxRow]:
    with engine.connect() as conn:
        return outbox.rows(conn)


def _ids(server: Any) -> list[str]:
    return [str(BytesParser(policy=policy.default).parsebytes(r.data)["Message-ID"])
            for r in server.received]


def test_a_permanent_refusal_is_kept_shown_everywhere_and_can_be_sent_again(
        engine: Engine, make_settings, tmp_path: Path, smtp_server: StartServer,
        capsys: pytest.CaptureFixture[str], quiet_mail_log: None) -> None:
    server = smtp_server(script=["554 5.7.1 message refused by policy"])
    world = _world(engine, make_settings, tmp_path, server.port)
    config = str(tmp_path / "fitwatch.toml")
    run = send_night_alerts(world.settings, NIGHT, now=night_after(NIGHT), engine=engine)
    assert (run.sent, run.failed, run.retried) == (0, 1, 0)  # RFC 5321 §4.2.1: 5yz permanent
    assert server.received == []
    # status, status --json
    (status,) = model_statuses(world.settings, engine=engine, now=night_after(NIGHT))
    assert status.undelivered is not None and status.undelivered.failed == 1
    assert "554" in (status.as_dict()["alerts_undelivered"]["last_error"] or "")
    capsys.readouterr()
    assert main(["--config", config, "status"]) == 0
    text = capsys.readouterr().out
    assert "ALERTS UNDELIVERED" in text and "--retry-failed" in text and "554" in text
    # --fail-on: the model is only on watch, but the planners were never told
    assert main(["--config", config, "check", "--through", str(NIGHT),
                 "--fail-on", "refit"]) == 3
    assert "could not be delivered" in capsys.readouterr().err
    # the next digest says so (it goes out: the server accepts from now on)
    _store(world, NIGHT + timedelta(days=1), "refit")
    later = send_night_alerts(world.settings, NIGHT + timedelta(days=1),
                              now=night_after(NIGHT + timedelta(days=1)), engine=engine)
    assert later.sent == 1
    body = BytesParser(policy=policy.default).parsebytes(server.received[0].data)
    assert "1 alert message(s) could not be delivered" in body.get_body(
        ("plain",)).get_content()  # type: ignore[union-attr]
    # and the failed one can be sent again, once
    assert main(["--config", config, "alerts", "--retry-failed"]) == 0
    assert "1 failed message(s) sent back to the queue" in capsys.readouterr().out
    assert [r.status for r in _rows(engine)] == ["sent", "sent"]
    assert len(server.received) == 2 and len(set(_ids(server))) == 2
    assert main(["--config", config, "check", "--through", str(NIGHT + timedelta(days=1)),
                 "--fail-on", "refit"]) == 3  # now for the refit itself
    assert "UNDELIVERED" not in capsys.readouterr().err


def test_a_transient_refusal_is_retried_and_delivered_once(
        engine: Engine, make_settings, tmp_path: Path, smtp_server: StartServer,
        quiet_mail_log: None) -> None:
    server = smtp_server(script=["451 4.3.0 try again later", "421 4.7.0 busy"])
    world = _world(engine, make_settings, tmp_path, server.port)
    now = night_after(NIGHT)
    first = send_night_alerts(world.settings, NIGHT, now=now, engine=engine)
    assert (first.sent, first.retried, first.failed) == (0, 1, 0)
    (status,) = model_statuses(world.settings, engine=engine, now=now)
    assert status.undelivered is not None and status.undelivered.retrying == 1
    second = send_due(world.settings, now=_rows(engine)[0].next_attempt_at, engine=engine)
    third = send_due(world.settings, now=_rows(engine)[0].next_attempt_at, engine=engine)
    assert (second.retried, third.sent) == (1, 1)
    assert len(server.received) == 1 and server.handler.data_commands == 3
    (row,) = _rows(engine)
    assert (row.status, row.attempts) == ("sent", 3)


@pytest.mark.parametrize(("fault", "copies"), [("drop", 1), ("store-drop", 2)])
def test_a_connection_cut_after_the_data_loses_nothing(
        engine: Engine, make_settings, tmp_path: Path, smtp_server: StartServer,
        quiet_mail_log: None, fault: str, copies: int) -> None:
    """Cut before the final reply: the client cannot know whether the server kept the
    message, so it sends it again. Dropped: it arrives once; kept: twice, the duplicate
    RFC 5321 §6.1 allows, with the same Message-ID; never more."""
    server = smtp_server(script=[fault])
    world = _world(engine, make_settings, tmp_path, server.port)
    now = night_after(NIGHT)
    first = send_night_alerts(world.settings, NIGHT, now=now, engine=engine)
    assert (first.sent, first.failed) == (0, 0) and _rows(engine)[0].status == "pending"
    again = send_due(world.settings, now=_rows(engine)[0].next_attempt_at, engine=engine)
    assert again.sent == 1
    assert len(server.received) == copies and len(set(_ids(server))) == 1
    assert send_due(world.settings, now=datetime(2026, 4, 1, tzinfo=UTC),
                    engine=engine).sent == 0
