"""Outbox first, then send: exactly once, retries with backoff, a real SMTP server on loopback.

References: RFC 5321 (SMTP: the envelope recipients, 5xx replies are permanent, §4.2.1),
RFC 4954 (SMTP AUTH), RFC 3207 (STARTTLS), RFC 8314 (implicit TLS for submission); the Python
stdlib ``email`` parser (``policy.default``) as the reference reader; aiosmtpd as the server.
The backoff schedule (5 min doubling, capped at 6 h) is common practice, no source.
"""

from __future__ import annotations

import base64
import logging
import ssl
from collections.abc import Callable
from dataclasses import replace
from datetime import date, timedelta
from email import policy
from email.parser import BytesParser
from pathlib import Path
from typing import Any

import pytest
import trustme
from sqlalchemy import Engine

from monitor.alerts import service
from monitor.alerts.mailer import SmtpMailer, scrub
from monitor.alerts.service import (
    CLAIM_SECONDS,
    RETRY_FOR,
    backoff,
    send_due,
    send_night_alerts,
)
from monitor.config import Settings, SmtpSettings
from monitor.errors import ConfigError
from monitor.store import outbox
from monitor.store.checks import insert_checks
from monitor.store.models import get_model
from monitor.store.versions import active_version
from tests.support.mail import (
    PASSWORD_ENV,
    SMTP_PASSWORD,
    SMTP_USER,
    RecordingMailer,
    StartServer,
    day_check,
    down,
    free_port,
)
from tests.support.world import MODEL, WORDS, World, night_after

NIGHT = date(2026, 3, 20)
LEAD = "planning.lead@example.com"
SENDER = "fitwatch@dc-north.example"


def _settings(make_settings: Callable[..., Settings], engine: Engine, tmp: Path,
              smtp: dict[str, Any] | None = None) -> Settings:
    alerts: dict[str, Any] = {"to": [LEAD], "sender": SENDER, "eml_dir": str(tmp / "mail")}
    if smtp is not None:
        alerts["smtp"] = smtp
    return make_settings(engine.url.render_as_string(hide_password=False), models=WORDS,
                         alerts=alerts)


@pytest.fixture
def world(engine: Engine, make_settings: Callable[..., Settings], tmp_path: Path) -> World:
    """The demo model fitted on the scenario's history, with a stored 'refit' check on NIGHT."""
    w = World(engine, _settings(make_settings, engine, tmp_path), tmp_path)
    with engine.begin() as conn:
        model = get_model(conn, MODEL)
        version = active_version(conn, model.id)
        assert version is not None
        insert_checks(conn, [
            day_check(NIGHT - timedelta(days=1), "ok", model_id=model.id,
                      version_id=version.id),
            day_check(NIGHT, "refit", NIGHT, model_id=model.id, version_id=version.id,
                      reasons=["Loads have run 6.1 min above plan on average"]),
        ])
    return w


def _rows(engine: Engine) -> list[outbox.OutboxRow]:
    with engine.connect() as conn:
        return outbox.rows(conn)


# exactly once ---------------------------------------------------------------------------------
def test_running_the_night_twice_sends_one_message(world: World,
                                                   recording: RecordingMailer) -> None:
    now = night_after(NIGHT)
    first = send_night_alerts(world.settings, NIGHT, now=now, engine=world.engine,
                              mailer=recording)
    again = send_night_alerts(world.settings, NIGHT, now=now + timedelta(hours=1),
                              engine=world.engine, mailer=recording)
    assert (first.queued, first.sent, again.queued, again.sent) == (1, 1, 0, 0)
    assert len(recording.sent) == 1 and recording.closed == 2
    (row,) = _rows(world.engine)
    assert (row.status, row.attempts, row.sent_at, row.recipient) == ("sent", 1, now, LEAD)
    assert row.subject == "fitwatch: dock_loading needs a refit"
    assert first.as_dict()["transport"] == "recording mailer"
    assert first.sentence() == ("night of 2026-03-20: 1 message(s) queued, 1 sent via "
                                "recording mailer")


def test_server_down_then_back_sends_once(world: World, smtp_server: StartServer) -> None:
    port = free_port()  # nothing listens there yet
    settings = _with_smtp(world, port, username="")
    now = night_after(NIGHT)
    run = send_night_alerts(settings, NIGHT, now=now, engine=world.engine)
    assert (run.queued, run.sent, run.retried, run.pending) == (1, 0, 1, 1)
    (row,) = _rows(world.engine)
    assert (row.status, row.attempts) == ("pending", 1)
    assert row.next_attempt_at == now + timedelta(minutes=5)
    assert f"127.0.0.1:{port}" in (row.last_error or "")
    server = smtp_server(port=port)
    early = send_due(settings, now=now + timedelta(minutes=4), engine=world.engine)
    assert (early.sent, server.received) == (0, [])  # not due yet: no attempt
    late = send_night_alerts(settings, NIGHT, now=now + timedelta(minutes=6),
                             engine=world.engine)
    assert (late.queued, late.sent, late.pending) == (0, 1, 0)
    assert len(server.received) == 1
    send_night_alerts(settings, NIGHT, now=now + timedelta(hours=2), engine=world.engine)
    assert len(server.received) == 1
    (row,) = _rows(world.engine)
    assert (row.status, row.attempts, row.sent_at) == ("sent", 2, now + timedelta(minutes=6))


def test_crash_between_queueing_and_sending_is_made_good_by_the_next_run(
        world: World, recording: RecordingMailer, monkeypatch: pytest.MonkeyPatch) -> None:
    def crash(*args: Any, **kwargs: Any) -> None:
        raise RuntimeError("power cut")

    monkeypatch.setattr(service, "send_due", crash)
    with pytest.raises(RuntimeError, match="power cut"):
        send_night_alerts(world.settings, NIGHT, now=night_after(NIGHT), engine=world.engine,
                          mailer=recording)
    (row,) = _rows(world.engine)
    assert (row.status, row.attempts) == ("pending", 0)
    monkeypatch.undo()
    run = send_night_alerts(world.settings, NIGHT, now=night_after(NIGHT) + timedelta(minutes=1),
                            engine=world.engine, mailer=recording)
    assert (run.queued, run.sent) == (0, 1) and len(recording.sent) == 1


def test_crash_inside_a_send_leaves_the_row_claimed_until_the_claim_expires(
        world: World, recording: RecordingMailer) -> None:
    now = night_after(NIGHT)
    recording.fail_with = RuntimeError("killed mid-send")
    with pytest.raises(RuntimeError):
        send_night_alerts(world.settings, NIGHT, now=now, engine=world.engine,
                          mailer=recording)
    recording.fail_with = None
    soon = send_due(world.settings, now=now + timedelta(seconds=CLAIM_SECONDS - 1),
                    engine=world.engine, mailer=recording)
    assert soon.sent == 0  # claimed by the run that died; nobody else touches it yet
    later = send_due(world.settings, now=now + timedelta(seconds=CLAIM_SECONDS),
                     engine=world.engine, mailer=recording)
    assert later.sent == 1 and len(recording.sent) == 1
    (row,) = _rows(world.engine)
    assert (row.status, row.attempts) == ("sent", 1)


def test_backoff_doubles_to_a_cap_and_gives_up_only_after_days(
        world: World, recording: RecordingMailer) -> None:
    """RFC 5321 §4.5.4.1: the give-up time "generally needs to be at least 4-5 days"; before,
    the outbox gave up after 10 attempts, about a day, so a weekend outage lost the alerts."""
    assert timedelta(days=4) <= RETRY_FOR
    assert [backoff(n) for n in (1, 2, 3, 4, 7, 8, 20)] == [
        timedelta(minutes=m) for m in (5, 10, 20, 40, 320, 360, 360)]
    recording.fail_with = down()
    queued = night_after(NIGHT)
    send_night_alerts(world.settings, NIGHT, now=queued, engine=world.engine, mailer=recording)
    tries = [queued]
    while True:
        (row,) = _rows(world.engine)
        if row.status != "pending":
            break
        run = send_due(world.settings, now=row.next_attempt_at, engine=world.engine,
                       mailer=recording)
        tries.append(row.next_attempt_at)
    assert (row.status, run.failed) == ("failed", 1)
    assert tries[-2] - queued < RETRY_FOR <= tries[-1] - queued  # kept trying for 5 days
    assert row.attempts == len(tries) > 20  # not 10 attempts in a day
    assert row.last_error == "connection refused (test)"
    assert send_due(world.settings, now=tries[-1] + timedelta(days=7), engine=world.engine,
                    mailer=recording).sent == 0


# a real SMTP server --------------------------------------------------------------------------
def test_messages_arrive_and_parse_back(world: World, smtp_server: StartServer) -> None:
    server = smtp_server()
    settings = _with_smtp(world, server.port, username="")
    run = send_night_alerts(settings, NIGHT, now=night_after(NIGHT), engine=world.engine)
    assert run.sent == 1 and run.transport == f"SMTP 127.0.0.1:{server.port} (none)"
    (got,) = server.received
    assert got.mail_from == SENDER and got.rcpt_tos == [LEAD]  # RFC 5321 envelope
    msg = BytesParser(policy=policy.default).parsebytes(got.data)
    assert msg["Subject"] == "fitwatch: dock_loading needs a refit"
    assert [p.get_content_type() for p in msg.walk()] == [
        "multipart/alternative", "text/plain", "multipart/related", "text/html", "image/png"]
    html = msg.get_body(("html",)).get_content()  # type: ignore[union-attr]
    image = next(p for p in msg.walk() if p.get_content_type() == "image/png")
    assert f'src="cid:{image["Content-ID"].strip("<>")}"' in html
    assert "Loads have run 6.1 min above plan on average" in html


def _with_smtp(world: World, port: int, **more: Any) -> Settings:
    """The world's settings with ``[alerts.smtp]`` on 127.0.0.1 (login as SMTP_USER unless
    ``username=""``, password from PASSWORD_ENV)."""
    values: dict[str, Any] = {"host": "127.0.0.1", "port": port, "security": "none",
                              "timeout_seconds": 5.0, "username": SMTP_USER,
                              "password_env": PASSWORD_ENV, **more}
    return replace(world.settings, alerts=replace(world.settings.alerts,
                                                  smtp=SmtpSettings(**values)))


def _no_secret(text: str, secret: str) -> None:
    assert secret not in text
    assert base64.b64encode(secret.encode()).decode() not in text
    plain = base64.b64encode(f"\0{SMTP_USER}\0{secret}".encode()).decode()
    assert plain not in text  # AUTH PLAIN's encoding (RFC 4616)


def test_auth_with_a_password_from_the_environment_never_logs_it(
        world: World, smtp_server: StartServer, monkeypatch: pytest.MonkeyPatch,
        caplog: pytest.LogCaptureFixture, quiet_mail_log: None) -> None:
    server = smtp_server(auth=True)
    monkeypatch.setenv(PASSWORD_ENV, SMTP_PASSWORD)
    settings = _with_smtp(world, server.port)
    with caplog.at_level(logging.DEBUG):
        run = send_night_alerts(settings, NIGHT, now=night_after(NIGHT), engine=world.engine)
    assert run.sent == 1 and len(server.received) == 1
    assert server.authenticator is not None and server.authenticator.attempts == [True]
    _no_secret(caplog.text, SMTP_PASSWORD)
    assert "sent to planning.lead@example.com" in caplog.text
    assert SMTP_PASSWORD not in repr(SmtpMailer(settings.alerts.smtp))  # type: ignore[arg-type]


def test_a_refused_login_keeps_the_password_out_of_the_error_and_the_log(
        world: World, smtp_server: StartServer, monkeypatch: pytest.MonkeyPatch,
        caplog: pytest.LogCaptureFixture, quiet_mail_log: None) -> None:
    server = smtp_server(auth=True)
    wrong = "Wrong-Secret-4711"
    monkeypatch.setenv(PASSWORD_ENV, wrong)
    with caplog.at_level(logging.DEBUG):
        run = send_night_alerts(_with_smtp(world, server.port), NIGHT, now=night_after(NIGHT),
                                engine=world.engine)
    assert (run.sent, run.retried) == (0, 1)  # a login failure is retried: config can be fixed
    (row,) = _rows(world.engine)
    assert row.last_error and "535" in row.last_error  # RFC 4954 §6: authentication failed
    _no_secret(row.last_error, wrong)
    _no_secret(caplog.text, wrong)


def test_a_missing_password_is_a_config_error_naming_the_variable(world: World) -> None:
    settings = _with_smtp(world, free_port(), password_env="FITWATCH_NOT_SET_ANYWHERE")
    with pytest.raises(ConfigError, match="FITWATCH_NOT_SET_ANYWHERE"):
        SmtpMailer(settings.alerts.smtp, environ={})  # type: ignore[arg-type]


def test_password_file(world: World, smtp_server: StartServer, tmp_path: Path) -> None:
    server = smtp_server(auth=True)
    secret = tmp_path / "smtp-password"
    secret.write_text(SMTP_PASSWORD + "\n")
    settings = _with_smtp(world, server.port, password_file=str(secret))
    mailer = SmtpMailer(settings.alerts.smtp, environ={})  # type: ignore[arg-type]
    run = send_night_alerts(settings, NIGHT, now=night_after(NIGHT), engine=world.engine,
                            mailer=mailer)
    assert run.sent == 1 and server.authenticator.attempts == [True]  # type: ignore[union-attr]


@pytest.fixture(scope="module")
def test_ca() -> trustme.CA:
    return trustme.CA()


def _tls_contexts(ca: trustme.CA) -> tuple[ssl.SSLContext, ssl.SSLContext]:
    server_ctx = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
    ca.issue_cert("127.0.0.1").configure_cert(server_ctx)
    client_ctx = ssl.create_default_context()  # what SmtpMailer uses, plus our test CA
    ca.configure_trust(client_ctx)
    return server_ctx, client_ctx


def test_starttls_with_auth(world: World, smtp_server: StartServer, test_ca: trustme.CA,
                            monkeypatch: pytest.MonkeyPatch, quiet_mail_log: None) -> None:
    server_ctx, client_ctx = _tls_contexts(test_ca)
    server = smtp_server(auth=True, starttls=server_ctx)
    monkeypatch.setenv(PASSWORD_ENV, SMTP_PASSWORD)
    settings = _with_smtp(world, server.port, security="starttls")
    mailer = SmtpMailer(settings.alerts.smtp, ssl_context=client_ctx)  # type: ignore[arg-type]
    run = send_night_alerts(settings, NIGHT, now=night_after(NIGHT), engine=world.engine,
                            mailer=mailer)
    assert run.sent == 1 and len(server.received) == 1
    assert server.authenticator.attempts == [True]  # type: ignore[union-attr]


def test_starttls_refuses_an_untrusted_certificate(world: World, smtp_server: StartServer,
                                                   test_ca: trustme.CA,
                                                   quiet_mail_log: None) -> None:
    server_ctx, _ = _tls_contexts(test_ca)
    server = smtp_server(starttls=server_ctx)
    settings = _with_smtp(world, server.port, security="starttls", username="")
    run = send_night_alerts(settings, NIGHT, now=night_after(NIGHT), engine=world.engine)
    assert (run.sent, run.retried, server.received) == (0, 1, [])
    (row,) = _rows(world.engine)
    assert "CERTIFICATE_VERIFY_FAILED" in (row.last_error or "")


def test_implicit_tls(world: World, smtp_server: StartServer, test_ca: trustme.CA,
                      quiet_mail_log: None) -> None:
    server_ctx, client_ctx = _tls_contexts(test_ca)
    server = smtp_server(implicit=server_ctx)
    settings = _with_smtp(world, server.port, security="tls", username="")
    mailer = SmtpMailer(settings.alerts.smtp, ssl_context=client_ctx)  # type: ignore[arg-type]
    run = send_night_alerts(settings, NIGHT, now=night_after(NIGHT), engine=world.engine,
                            mailer=mailer)
    assert run.sent == 1 and len(server.received) == 1


def test_a_permanent_refusal_is_not_retried(world: World, smtp_server: StartServer) -> None:
    server = smtp_server()

    async def refuse(server_: Any, session: Any, envelope: Any, address: str,
                     options: list[str]) -> str:
        return "550 5.1.1 mailbox unavailable"

    server.handler.handle_RCPT = refuse  # type: ignore[attr-defined]
    run = send_night_alerts(_with_smtp(world, server.port, username=""), NIGHT,
                            now=night_after(NIGHT), engine=world.engine)
    assert (run.sent, run.failed, run.retried) == (0, 1, 0)  # RFC 5321 §4.2.1: 5yz permanent
    (row,) = _rows(world.engine)
    assert row.status == "failed" and "550" in (row.last_error or "")


def test_a_claimed_row_is_left_to_its_sender(world: World, recording: RecordingMailer) -> None:
    now = night_after(NIGHT)
    service.queue_night(world.settings, NIGHT, now=now, engine=world.engine)
    with world.engine.begin() as conn:
        (row_id,) = outbox.due_ids(conn, now)
        first = outbox.claim(conn, row_id, now, now + timedelta(seconds=CLAIM_SECONDS))
        second = outbox.claim(conn, row_id, now, now + timedelta(seconds=CLAIM_SECONDS))
    assert first is not None and first.attempts == 0 and second is None
    assert send_due(world.settings, now=now, engine=world.engine, mailer=recording).sent == 0


def test_scrub_removes_the_password_in_every_form_smtp_uses() -> None:
    secret = "Pa55-w0rd!"
    plain = base64.b64encode(f"\0{SMTP_USER}\0{secret}".encode()).decode()  # RFC 4616
    login = base64.b64encode(secret.encode()).decode()  # AUTH LOGIN's answer
    reply = f"535 5.7.8 rejected {plain} / {login} / {secret}"
    cleaned = scrub(reply, secret)
    assert cleaned == "535 5.7.8 rejected *** / *** / ***"
    assert scrub(reply, None) == reply


def test_an_unreachable_server_is_tried_once_per_run_not_once_per_message(
        world: World, make_settings: Callable[..., Settings]) -> None:
    port = free_port()  # nothing listens there
    url = world.engine.url.render_as_string(hide_password=False)
    settings = make_settings(url, models=WORDS, alerts={
        "to": [LEAD, "night.office@example.com"], "sender": SENDER,
        "smtp": {"host": "127.0.0.1", "port": port, "security": "none",
                 "timeout_seconds": 5.0}})
    run = send_night_alerts(settings, NIGHT, now=night_after(NIGHT), engine=world.engine)
    assert (run.queued, run.sent, run.retried, run.pending) == (2, 0, 1, 2)
    assert sorted(row.attempts for row in _rows(world.engine)) == [0, 1]  # second not tried
