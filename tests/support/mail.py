"""Mail test doubles: day checks made by hand, a recording mailer (the Mailer seam's test
double), and the parts of a real SMTP server on loopback (aiosmtpd) with optional AUTH."""

from __future__ import annotations

import socket
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, timedelta
from email.message import EmailMessage
from typing import Any

from aiosmtpd.controller import Controller
from aiosmtpd.smtp import AuthResult, LoginPassword

from monitor.alerts.mailer import DeliveryError
from monitor.domain.check import CheckDetails, CheckState, DayCheck
from monitor.domain.status import Status

SMTP_USER = "fitwatch-night"
SMTP_PASSWORD = "s3cret-Pa55-word-for-tests"
PASSWORD_ENV = "FITWATCH_TEST_SMTP_PASSWORD"


def day_check(day: date, status: str = "ok", since: date | None = None, *, model_id: int = 1,
              version_id: int = 1, reasons: list[str] | None = None, model: str = "dock_loading",
              **figures: Any) -> DayCheck:
    """A stored-looking day check with plausible figures (for cadence tests)."""
    values: dict[str, Any] = {
        "model_id": model_id, "day": day, "version_id": version_id, "stats_revision": 1,
        "n": 78, "covered": 74, "extrapolated": 0, "coverage": 74 / 78, "mean_residual": 0.4,
        "window_n": 1000, "window_covered": 948, "window_coverage": 0.948,
        "wilson_low": 0.933, "wilson_high": 0.960, "coverage_p_low": 0.41,
        "coverage_p_high": 0.62, "cusum_u": 0.2, "cusum_upper": 0.7, "cusum_lower": 0.0,
        "cusum_upper_run": 2, "cusum_lower_run": 0, "cusum_h": 10.9, "cusum_signal": False,
        "cusum_onset": None, "cusum_shift": None, "slope_statistic": 0.8, "slope_pvalue": 0.37,
        "slope_method": "clustered", "chow_statistic": 0.9, "chow_pvalue": 0.4,
        "change_day": None, "supf_statistic": 3.0, "supf_pvalue": 0.5, "spread_ratio": 1.02,
        "spread_pvalue": 0.4, "status": Status(status), "status_since": since or day,
        "reasons": tuple(reasons) if reasons is not None else (f"{status} on {day}",),
        "details": CheckDetails(), "state": CheckState(),
        "checked_at": datetime.combine(day + timedelta(days=1), datetime.min.time(), UTC),
    }
    values.update(figures)
    return DayCheck(**values, model=model)


@dataclass
class RecordingMailer:
    """The test double of the Mailer seam: keeps what it is given; can be told to fail."""

    sent: list[tuple[str, EmailMessage]] = field(default_factory=list)
    fail_with: BaseException | None = None
    closed: int = 0

    def where(self) -> str:
        return "recording mailer"

    def send(self, message: EmailMessage, *, key: str) -> None:
        if self.fail_with is not None:
            raise self.fail_with
        self.sent.append((key, message))

    def close(self) -> None:
        self.closed += 1


def down() -> DeliveryError:
    return DeliveryError("connection refused (test)")


# a real SMTP server --------------------------------------------------------------------------
@dataclass
class Received:
    mail_from: str
    rcpt_tos: list[str]
    data: bytes


class Handler:
    def __init__(self) -> None:
        self.received: list[Received] = []

    async def handle_DATA(self, server: Any, session: Any, envelope: Any) -> str:
        self.received.append(Received(envelope.mail_from, list(envelope.rcpt_tos),
                                      envelope.original_content or envelope.content))
        return "250 Message accepted for delivery"


class FaultyHandler(Handler):
    """A server that misbehaves on purpose, one scripted reply per DATA command, then 250.

    Script entries: an SMTP reply (``"451 4.3.0 try again later"``, ``"554 5.7.1 refused"``),
    ``"drop"`` (the connection is cut after the data arrived, before any reply: the message is
    not kept, as a crash before the queue file is written) or ``"store-drop"`` (the message is
    kept, then the connection is cut before the reply: the one case where SMTP itself makes the
    client send it again, RFC 5321 §4.1.1.4 and §6.1).
    """

    def __init__(self, script: list[str]) -> None:
        super().__init__()
        self.script = list(script)
        self.data_commands = 0

    async def handle_DATA(self, server: Any, session: Any, envelope: Any) -> str:
        self.data_commands += 1
        step = self.script.pop(0) if self.script else "250"
        if step in ("drop", "store-drop"):
            if step == "store-drop":
                await super().handle_DATA(server, session, envelope)
            server.transport.abort()
            return "250 never seen by the client"
        if step.startswith("2"):
            return await super().handle_DATA(server, session, envelope)
        return step


class Authenticator:
    def __init__(self, user: str, password: str):
        self.user, self.password = user.encode(), password.encode()
        self.attempts: list[bool] = []

    def __call__(self, server: Any, session: Any, envelope: Any, mechanism: str,
                 auth_data: Any) -> AuthResult:
        ok = (isinstance(auth_data, LoginPassword) and auth_data.login == self.user
              and auth_data.password == self.password)
        self.attempts.append(ok)
        return AuthResult(success=ok, handled=False)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@dataclass
class SmtpServer:
    controller: Controller
    handler: Handler
    authenticator: Authenticator | None

    @property
    def port(self) -> int:
        return int(self.controller.port)

    @property
    def received(self) -> list[Received]:
        return self.handler.received


StartServer = Callable[..., SmtpServer]

