"""What cron and the next daemon see after a failure: ``daemon --once`` exits non-zero when a
model failed, and a lease holder killed outright (SIGKILL) on this host is taken over at once
instead of blocking every run until its lease expires; messages say when a lease expires."""

from __future__ import annotations

import logging
import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path

import pytest
from sqlalchemy import Engine

import monitor.runtime.nightly as nightly
from monitor.config import Settings
from monitor.interface.cli import main
from monitor.runtime.schedule import nightly_state
from monitor.store import lease
from tests.support.world import World, settings_for

ROOT = Path(__file__).resolve().parents[1]


def _config(engine: Engine, tmp: Path) -> Path:
    path = tmp / "fitwatch.toml"
    path.write_text(f'[database]\nurl = "{engine.url.render_as_string(hide_password=False)}"\n'
                    '[schedule]\ncron = "0 3 1 1 *"\ntimezone = "Europe/Berlin"\n'
                    f'[alerts]\neml_dir = "{tmp / "mail"}"\n')
    return path


def test_daemon_once_exits_non_zero_when_a_model_failed(
        engine: Engine, make_settings: Callable[..., Settings], tmp_path: Path,
        monkeypatch: pytest.MonkeyPatch, caplog: pytest.LogCaptureFixture) -> None:
    caplog.set_level(logging.INFO, logger="monitor.runtime.daemon")
    World(engine, settings_for(make_settings, engine), tmp_path)

    def broken(*args: object, **kwargs: object) -> None:
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(nightly, "run_checks", broken)
    assert main(["--config", str(_config(engine, tmp_path)), "daemon", "--once"]) == 2
    # the run's sentence, said once in the log, names it
    assert any("nightly run: " in r.getMessage() and "disk on fire" in r.getMessage()
               for r in caplog.records)
    with engine.connect() as conn:
        assert lease.read(conn).last_run_status == "partial"


def _lease_row(engine: Engine) -> lease.LeaseState | None:
    with engine.connect() as conn:
        return lease.read(conn)


@pytest.mark.slow
def test_a_killed_daemon_on_this_host_is_taken_over_at_once(
        engine: Engine, make_settings: Callable[..., Settings], tmp_path: Path,
        capsys: pytest.CaptureFixture[str]) -> None:
    config = _config(engine, tmp_path)
    code = ("import logging; from monitor.config import load_settings;"
            "from monitor.runtime.daemon import run_daemon;"
            "logging.basicConfig(level=logging.INFO);"
            f"run_daemon(load_settings({str(config)!r}))")
    env = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONWARNINGS": "error"}
    with (tmp_path / "daemon.log").open("w") as log_file:
        daemon = subprocess.Popen([sys.executable, "-c", code], cwd=ROOT, env=env,
                                  stdout=subprocess.DEVNULL, stderr=log_file)
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline:
            row = _lease_row(engine)
            if row and row.holder and row.last_run_finished_at is not None:
                break
            time.sleep(0.2)
        else:
            raise AssertionError((tmp_path / "daemon.log").read_text())
        assert row.holder.split(":")[1] == str(daemon.pid)
        # alive: --once refuses and says until when the lease runs
        capsys.readouterr()
        assert main(["--config", str(config), "daemon", "--once"]) == 1
        said = capsys.readouterr().err
        assert f"until {row.expires_at:%Y-%m-%d %H:%M}" in said and row.holder in said
        os.kill(daemon.pid, signal.SIGKILL)
        daemon.wait(timeout=30)
    finally:
        if daemon.poll() is None:
            daemon.kill()
            daemon.wait()
    settings = settings_for(make_settings, engine)
    state = nightly_state(settings, _lease_row(engine), datetime.now(UTC))
    assert state.holder_gone and not state.daemon_alive
    assert "is gone" in state.sentence() and "takes it over at once" in state.sentence()
    # dead: the next run takes the lease over at once (it would have waited 10 minutes)
    started = time.monotonic()
    assert main(["--config", str(config), "daemon", "--once"]) == 0
    assert time.monotonic() - started < 60
    after = _lease_row(engine)
    assert after is not None and after.holder is None and after.last_run_status == "ok"
