"""Running :mod:`tests.support.crash_night` as a real child process, and what the kill tests
compare against: the messages an uninterrupted run would queue, derived from the stored checks."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from datetime import UTC, datetime
from pathlib import Path

from sqlalchemy import Engine, select

from monitor.alerts.compose import KIND_NIGHT, dedupe_key
from monitor.alerts.news import digests
from monitor.alerts.service import night_news
from monitor.config import Settings
from monitor.store.schema import day_checks, outbox

ROOT = Path(__file__).resolve().parents[2]


def night_config(tmp: Path, url: str, *, smtp_port: int | None = None) -> Path:
    """A configuration file for the dock-loading world: inbox, words, one recipient."""
    transport = (f'[alerts.smtp]\nhost = "127.0.0.1"\nport = {smtp_port}\nsecurity = "none"\n'
                 if smtp_port else "")
    path = tmp / "fitwatch.toml"
    path.write_text(
        f'[database]\nurl = "{url}"\n'
        '[schedule]\ntimezone = "Europe/Berlin"\n'
        f'[ingest]\ninbox = "{tmp / "inbox"}"\n'
        # every night of these worlds is mailed (they span four weeks; the catch-up horizon
        # has its own test in tests/test_daemon.py)
        f'[alerts]\nto = ["planning.lead@example.com"]\neml_dir = "{tmp / "mail"}"\n'
        'catch_up_nights = 60\n'
        + transport +
        '[models.dock_loading.words]\nrow = "load"\nrows = "loads"\ny_unit = "min"\n'
        '[models.dock_loading.words.x_units]\npallets = "pallet"\n')
    return path


def run_child(point: str, config: Path, now: datetime, timeout: float = 300) -> int:
    """Run one night in a child process armed at ``point``; its exit code (-9: killed)."""
    env = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONWARNINGS": "error"}
    child = subprocess.run([sys.executable, "-m", "tests.support.crash_night", point,
                            str(config), now.isoformat()], cwd=ROOT, env=env,
                           capture_output=True, text=True, timeout=timeout)
    if child.returncode not in (0, -signal.SIGKILL):
        raise AssertionError(f"the child failed ({child.returncode}):\n{child.stderr}")
    if child.returncode == 0:
        assert "DONE" in child.stdout, child.stderr
    return child.returncode


def expected_keys(settings: Settings, engine: Engine, now: datetime | None = None) -> set[str]:
    """The dedupe keys of every digest the stored checks call for (one model: no late keys;
    the worlds' data have no findings, so ``now`` changes nothing)."""
    with engine.connect() as conn:
        nights = sorted(set(conn.execute(select(day_checks.c.day)).scalars()))
        keys = set()
        for night in nights:
            news, _ = night_news(settings, conn, night, now=now or datetime.now(UTC))
            keys.update(dedupe_key(d.recipient, night, KIND_NIGHT) for d in digests(news))
    return keys


def outbox_rows(engine: Engine) -> list[tuple[str, str]]:
    with engine.connect() as conn:
        return [(r.dedupe_key, r.status) for r in conn.execute(
            select(outbox.c.dedupe_key, outbox.c.status).order_by(outbox.c.id))]
