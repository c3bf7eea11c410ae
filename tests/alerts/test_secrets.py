"""Hostile SMTP passwords (non-ASCII, quotes, backslashes, newlines) reach no output, log line
or database row, whatever happens: accepted, refused, or a server that cannot take them.

The forms searched for are written out here, independently of the scrubbing code: the
password as typed; as Python's ``repr``/``ascii`` and JSON escape it (exception texts, JSON
columns); base64 of its UTF-8 bytes; and AUTH PLAIN's base64 of "\\0user\\0password"
(RFC 4616 §2, UTF-8). AUTH PLAIN in UTF-8 is how a non-ASCII password is sent (RFC 4616;
RFC 4954 for SMTP AUTH).
"""

from __future__ import annotations

import base64
import json
import logging
from collections.abc import Callable
from datetime import date, timedelta
from pathlib import Path

import pytest
from sqlalchemy import Engine, select

from monitor.config import Settings
from monitor.interface.cli import main
from monitor.store import outbox
from monitor.store.checks import insert_checks
from monitor.store.models import get_model
from monitor.store.schema import metadata
from monitor.store.versions import active_version
from tests.support.mail import PASSWORD_ENV, SMTP_USER, StartServer, day_check
from tests.support.world import MODEL, World, settings_for

NIGHT = date(2026, 3, 20)
HOSTILE = ["pässwörd-Grüße-42", "пароль-секрет-7", "q\"uo'te\\back\nslash\r\tend-9x",
           "ünï'code\"\n mixed\\x41-Zz"]


def _forms(password: str) -> set[str]:
    plain = f"\0{SMTP_USER}\0{password}".encode()
    return {password, repr(password)[1:-1], ascii(password)[1:-1], json.dumps(password)[1:-1],
            base64.b64encode(password.encode()).decode(), base64.b64encode(plain).decode()}


def _database_text(engine: Engine) -> str:
    """Every value of every table, as text (JSON columns both ways, bytes as Latin-1)."""
    out = []
    with engine.connect() as conn:
        for table in metadata.sorted_tables:
            for row in conn.execute(select(table)):
                for value in row:
                    if isinstance(value, bytes):
                        out.append(value.decode("latin-1"))
                    elif isinstance(value, dict | list):
                        out += [json.dumps(value), json.dumps(value, ensure_ascii=False)]
                    elif value is not None:
                        out.append(str(value))
    return "\n".join(out)


def _nowhere(password: str, *texts: str) -> None:
    for text in texts:
        for form in _forms(password):
            assert form not in text, f"the password leaked as {form!r}"


@pytest.fixture
def world(engine: Engine, make_settings: Callable[..., Settings], tmp_path: Path) -> World:
    w = World(engine, settings_for(make_settings, engine), tmp_path)
    with engine.begin() as conn:
        model = get_model(conn, MODEL)
        version = active_version(conn, model.id)
        assert version is not None
        insert_checks(conn, [day_check(NIGHT - timedelta(days=1), "ok", model_id=model.id,
                                       version_id=version.id),
                             day_check(NIGHT, "refit", NIGHT, model_id=model.id,
                                       version_id=version.id)])
    return w


def _config(world: World, port: int) -> str:
    path = world.tmp / "fitwatch.toml"
    path.write_text(
        f'[database]\nurl = "{world.engine.url.render_as_string(hide_password=False)}"\n'
        '[schedule]\ntimezone = "Europe/Berlin"\n'
        '[alerts]\nto = ["planning.lead@example.com"]\n'
        f'[alerts.smtp]\nhost = "127.0.0.1"\nport = {port}\nsecurity = "none"\n'
        f'username = "{SMTP_USER}"\npassword_env = "{PASSWORD_ENV}"\ntimeout_seconds = 5.0\n')
    return str(path)


def _run(config: str, capsys: pytest.CaptureFixture[str],
         caplog: pytest.LogCaptureFixture) -> tuple[int, str]:
    with caplog.at_level(logging.DEBUG):
        code = main(["--config", config, "alerts", "--night", str(NIGHT)])
    out = capsys.readouterr()
    return code, out.out + out.err + caplog.text


@pytest.mark.parametrize("password", HOSTILE)
@pytest.mark.parametrize("server_takes", ["it", "another", "no PLAIN"])
def test_a_hostile_password_never_leaks(
        world: World, smtp_server: StartServer, monkeypatch: pytest.MonkeyPatch,
        capsys: pytest.CaptureFixture[str], caplog: pytest.LogCaptureFixture,
        quiet_mail_log: None, password: str, server_takes: str) -> None:
    monkeypatch.setenv(PASSWORD_ENV, password)
    server = smtp_server(auth=True, password=password if server_takes == "it" else "other-1",
                         without=("PLAIN",) if server_takes == "no PLAIN" else ())
    code, said = _run(_config(world, server.port), capsys, caplog)
    assert code == 0, said  # a delivery failure is an outcome, not a crash
    with world.engine.connect() as conn:
        (row,) = outbox.rows(conn)
    if server_takes == "it":
        assert row.status == "sent" and len(server.received) == 1
    else:  # refused (RFC 4954 §6: 535) or not sendable: kept for a retry, never a crash
        assert row.status == "pending" and row.attempts == 1 and server.received == []
        assert row.last_error and (("535" in row.last_error) or "PLAIN" in row.last_error)
    _nowhere(password, said, _database_text(world.engine))


def test_a_non_ascii_password_is_sent_as_utf8_auth_plain(
        world: World, smtp_server: StartServer, monkeypatch: pytest.MonkeyPatch,
        capsys: pytest.CaptureFixture[str], caplog: pytest.LogCaptureFixture,
        quiet_mail_log: None) -> None:
    server = smtp_server(auth=True, password=HOSTILE[0])
    monkeypatch.setenv(PASSWORD_ENV, HOSTILE[0])
    code, said = _run(_config(world, server.port), capsys, caplog)
    assert code == 0 and "1 sent" in said
    assert server.authenticator is not None and server.authenticator.attempts == [True]



