"""Where messages go: an SMTP server, or ``.eml`` files in a folder when none is configured.

The seam is the :class:`Mailer` protocol (``send`` one message, ``close`` when done, ``where``
in words); tests add a recording fake. The SMTP password comes from the environment variable
named by ``password_env`` or from ``password_file``: never from the configuration file, and it
never appears in a log line or an error message (server replies are scrubbed of it too).
"""

from __future__ import annotations

import base64
import contextlib
import json
import logging
import os
import re
import smtplib
import ssl
import tempfile
from collections.abc import Mapping
from email.message import EmailMessage
from email.policy import SMTP as SMTP_POLICY
from pathlib import Path
from typing import Protocol

from monitor.config import AlertSettings, SmtpSettings
from monitor.errors import ConfigError

log = logging.getLogger(__name__)


class Mailer(Protocol):
    """Hands messages on; ``send`` returns once the message is accepted or raises."""

    def where(self) -> str:
        """Where messages go, in words (a host or a folder; never a password)."""
        ...

    def send(self, message: EmailMessage, *, key: str) -> None:
        """Deliver one message; ``key`` is its outbox dedupe key (stable across retries)."""
        ...

    def close(self) -> None:
        """Release connections; safe to call more than once."""
        ...


class DeliveryError(Exception):
    """A message could not be handed on. ``permanent``: retrying the same message cannot help
    (the server refused it with a 5xx reply, RFC 5321 §4.2.1). ``unreachable``: no connection
    could be made, so the other messages of this run would fail the same way."""

    def __init__(self, message: str, *, permanent: bool = False, unreachable: bool = False):
        super().__init__(message)
        self.permanent = permanent
        self.unreachable = unreachable


def read_password(smtp: SmtpSettings, environ: Mapping[str, str] | None = None) -> str | None:
    """The SMTP password from ``password_file`` (if set) or the ``password_env`` variable.

    None when no username is configured (no login). Errors name where the password was looked
    for, never its value.
    """
    if not smtp.username:
        return None
    env = os.environ if environ is None else environ
    if smtp.password_file:
        path = Path(smtp.password_file).expanduser()
        try:
            text = path.read_text(encoding="utf-8")
        except OSError as exc:
            raise ConfigError(f"cannot read the SMTP password file {path}: {exc.strerror}",
                              key="alerts.smtp.password_file") from None
        password = text.rstrip("\r\n")
        if not password:
            raise ConfigError(f"the SMTP password file {path} is empty",
                              key="alerts.smtp.password_file")
        return password
    if smtp.password_env and env.get(smtp.password_env):
        return env[smtp.password_env]
    raise ConfigError(f"SMTP user {smtp.username!r} is set but no password was found: set the "
                      f"environment variable {smtp.password_env or '(password_env is empty)'} "
                      "or alerts.smtp.password_file", key="alerts.smtp.username")


def secret_forms(secret: str) -> set[str]:
    """The ways ``secret`` can appear in text: as typed, escaped as ``repr``/``ascii``/JSON
    write it (an exception's text, a JSON column), and base64 of its UTF-8 and Latin-1 bytes."""
    forms = {secret, repr(secret)[1:-1], ascii(secret)[1:-1], json.dumps(secret)[1:-1],
             json.dumps(secret, ensure_ascii=False)[1:-1],
             secret.encode("unicode_escape").decode("ascii")}
    for encoding in ("utf-8", "latin-1"):
        with contextlib.suppress(UnicodeEncodeError):
            forms.add(base64.b64encode(secret.encode(encoding)).decode())
    return {form for form in forms if form}


def scrub(text: str, secret: str | None) -> str:
    """``text`` with ``secret`` (as typed, escaped, and as SMTP AUTH encodes it) replaced by
    ***."""
    if not secret:
        return text
    for form in sorted(secret_forms(secret), key=len, reverse=True):
        text = text.replace(form, "***")
    # AUTH PLAIN sends base64("\0user\0password"); any base64 run that decodes to something
    # holding the password goes too
    for token in set(re.findall(r"[A-Za-z0-9+/=]{8,}", text)):
        try:
            decoded = base64.b64decode(token, validate=True)
        except ValueError:
            continue
        if secret.encode() in decoded or secret.encode("utf-8", "replace") in decoded:
            text = text.replace(token, "***")
    return text


def _login(conn: smtplib.SMTP, user: str, password: str) -> None:
    """Log in; credentials outside ASCII go as AUTH PLAIN in UTF-8 (RFC 4616 §2), which
    smtplib's own ``login`` cannot send (it encodes the AUTH string as ASCII and raises
    ``UnicodeEncodeError`` with the password in the exception's text)."""
    if (user + password).isascii():
        conn.login(user, password)
        return
    if not conn.has_extn("auth") or "PLAIN" not in conn.esmtp_features["auth"].upper().split():
        raise smtplib.SMTPNotSupportedError(
            "the SMTP password or user name has characters outside ASCII, which can only be "
            "sent with AUTH PLAIN, and this server does not offer it")
    token = base64.b64encode(f"\0{user}\0{password}".encode()).decode("ascii")
    code, reply = conn.docmd("AUTH", f"PLAIN {token}")
    if code not in (235, 503):  # RFC 4954 §6: 235 accepted; 503 already authenticated
        raise smtplib.SMTPAuthenticationError(code, reply)


class SmtpMailer:
    """Sends through an SMTP server, one connection per run (opened on the first message).

    ``security``: ``starttls`` (plain connect, then STARTTLS with certificate and host name
    checked), ``tls`` (implicit TLS from the first byte, ``SMTP_SSL``) or ``none`` (loopback
    hosts only; the configuration refuses others). Login only when a username is set.
    """

    def __init__(self, smtp: SmtpSettings, *, environ: Mapping[str, str] | None = None,
                 ssl_context: ssl.SSLContext | None = None):
        self.settings = smtp
        self._password = read_password(smtp, environ)
        self._context = ssl_context
        self._conn: smtplib.SMTP | None = None

    def __repr__(self) -> str:
        return f"SmtpMailer({self.where()})"

    def where(self) -> str:
        s = self.settings
        user = f" as {s.username}" if s.username else ""
        return f"SMTP {s.host}:{s.port} ({s.security}){user}"

    def _tls(self) -> ssl.SSLContext:
        return self._context if self._context is not None else ssl.create_default_context()

    def _connect(self) -> smtplib.SMTP:
        s = self.settings
        conn: smtplib.SMTP
        if s.security == "tls":
            conn = smtplib.SMTP_SSL(s.host, s.port, timeout=s.timeout_seconds,
                                    context=self._tls())
        else:
            conn = smtplib.SMTP(s.host, s.port, timeout=s.timeout_seconds)
        try:
            conn.ehlo()
            if s.security == "starttls":
                conn.starttls(context=self._tls())
                conn.ehlo()
            if s.username:
                assert self._password is not None
                _login(conn, s.username, self._password)
        except BaseException:
            _quietly_close(conn)
            raise
        return conn

    def send(self, message: EmailMessage, *, key: str) -> None:
        connecting = self._conn is None
        try:
            if self._conn is None:
                self._conn = self._connect()
            refused = self._conn.send_message(message)
        except smtplib.SMTPResponseException as exc:
            self._drop()
            reply = exc.smtp_error.decode("utf-8", "replace") if isinstance(
                exc.smtp_error, bytes) else str(exc.smtp_error)
            permanent = 500 <= exc.smtp_code < 600 and not isinstance(
                exc, smtplib.SMTPAuthenticationError)
            raise DeliveryError(self._say(f"{self.where()} replied {exc.smtp_code} {reply}"),
                                permanent=permanent) from None
        except smtplib.SMTPRecipientsRefused as exc:
            self._drop()
            codes = [code for code, _ in exc.recipients.values()]
            detail = "; ".join(f"{rcpt}: {code} {msg.decode('utf-8', 'replace')}"
                               for rcpt, (code, msg) in exc.recipients.items())
            raise DeliveryError(self._say(f"{self.where()} refused the recipient ({detail})"),
                                permanent=all(500 <= c < 600 for c in codes)) from None
        except (smtplib.SMTPException, OSError) as exc:
            self._drop()
            raise DeliveryError(self._say(f"cannot deliver through {self.where()}: "
                                          f"{type(exc).__name__}: {exc}"),
                                unreachable=connecting) from None
        except Exception as exc:  # e.g. UnicodeError: its text may quote what was encoded
            self._drop()
            log.debug("delivery through %s failed with %s", self.where(), type(exc).__name__)
            raise DeliveryError(f"cannot deliver through {self.where()}: {type(exc).__name__} "
                                "(details withheld: they could contain the credentials)",
                                unreachable=connecting) from None
        if refused:  # only possible with several recipients; ours have one
            raise DeliveryError(self._say(f"{self.where()} refused {sorted(refused)}"),
                                permanent=True)

    def _say(self, text: str) -> str:
        return scrub(text, self._password)

    def _drop(self) -> None:
        if self._conn is not None:
            _quietly_close(self._conn)
            self._conn = None

    def close(self) -> None:
        if self._conn is not None:
            with contextlib.suppress(smtplib.SMTPException, OSError):
                self._conn.quit()
            _quietly_close(self._conn)
            self._conn = None


def _quietly_close(conn: smtplib.SMTP) -> None:
    with contextlib.suppress(OSError):
        conn.close()


class EmlFolderMailer:
    """Writes each message as an RFC 5322 ``.eml`` file (CRLF line ends) into a folder.

    The file name comes from the outbox dedupe key, and the file is written to a temporary
    name, flushed to disk and renamed into place, so a reader never sees half a message and
    writing the same message again replaces it instead of adding a second copy.
    """

    def __init__(self, folder: str | os.PathLike[str]):
        self.folder = Path(folder).expanduser()

    def __repr__(self) -> str:
        return f"EmlFolderMailer({self.folder})"

    def where(self) -> str:
        return f"folder {self.folder}"

    def path_for(self, key: str) -> Path:
        name = re.sub(r"[^A-Za-z0-9@._-]+", "_", key).strip("._") or "message"
        return self.folder / f"{name}.eml"

    def send(self, message: EmailMessage, *, key: str) -> None:
        target = self.path_for(key)
        try:
            self.folder.mkdir(parents=True, exist_ok=True)
            data = message.as_bytes(policy=SMTP_POLICY)
            fd, temp = tempfile.mkstemp(prefix=".writing-", suffix=".eml", dir=self.folder)
            try:
                with os.fdopen(fd, "wb") as fh:
                    fh.write(data)
                    fh.flush()
                    os.fsync(fh.fileno())
                os.replace(temp, target)
            except BaseException:
                Path(temp).unlink(missing_ok=True)
                raise
        except OSError as exc:
            raise DeliveryError(f"cannot write {target}: {exc.strerror or exc}") from None

    def close(self) -> None:
        return None


def mailer_for(alerts: AlertSettings, *, environ: Mapping[str, str] | None = None) -> Mailer:
    """SMTP when ``[alerts.smtp]`` is configured, else the ``.eml`` folder ``eml_dir``."""
    if alerts.smtp is not None:
        return SmtpMailer(alerts.smtp, environ=environ)
    return EmlFolderMailer(alerts.eml_dir)
