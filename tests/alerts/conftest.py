"""Fixtures for the alert tests: a recording mailer, a real SMTP server on loopback (aiosmtpd),
optionally with AUTH, STARTTLS or implicit TLS, and a quiet mail log. The doubles themselves live
in ``tests/support/mail.py``."""

from __future__ import annotations

import logging
import ssl
from collections.abc import Iterator
from typing import Any

import pytest
from aiosmtpd.controller import Controller

from tests.support.mail import (
    SMTP_PASSWORD,
    SMTP_USER,
    Authenticator,
    FaultyHandler,
    Handler,
    RecordingMailer,
    SmtpServer,
    StartServer,
    free_port,
)


@pytest.fixture
def recording() -> RecordingMailer:
    return RecordingMailer()


@pytest.fixture
def smtp_server() -> Iterator[StartServer]:
    """``smtp_server(auth=False, starttls=None, implicit=None, port=None, script=None,
    password=SMTP_PASSWORD, without=())`` starts a server on 127.0.0.1. ``script``: the
    scripted faults of ``FaultyHandler``; ``password``: the one AUTH accepts for SMTP_USER;
    ``without``: AUTH mechanisms not offered; ``starttls``/``implicit`` take a server-side
    SSLContext. Stopped after the test."""
    started: list[Controller] = []

    def start(*, auth: bool = False, starttls: ssl.SSLContext | None = None,
              implicit: ssl.SSLContext | None = None, port: int | None = None,
              script: list[str] | None = None, password: str = SMTP_PASSWORD,
              without: tuple[str, ...] = ()) -> SmtpServer:
        handler = Handler() if script is None else FaultyHandler(script)
        authenticator = Authenticator(SMTP_USER, password) if auth else None
        kwargs: dict[str, Any] = {}
        if authenticator is not None:
            kwargs.update(authenticator=authenticator, auth_require_tls=starttls is not None,
                          auth_exclude_mechanism=list(without))
        if starttls is not None:
            kwargs.update(tls_context=starttls, require_starttls=True)
        if implicit is not None:
            kwargs.update(ssl_context=implicit)
        controller = Controller(handler, hostname="127.0.0.1", port=port or free_port(),
                                **kwargs)
        controller.start()
        started.append(controller)
        return SmtpServer(controller, handler, authenticator)

    yield start
    for controller in started:
        controller.stop()


@pytest.fixture
def quiet_mail_log() -> Iterator[None]:
    """aiosmtpd logs every session at INFO on 'mail.log'; keep caplog to our own records."""
    logger = logging.getLogger("mail.log")
    level = logger.level
    logger.setLevel(logging.WARNING)
    yield
    logger.setLevel(level)
