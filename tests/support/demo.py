"""The demo run once per test session, through the command line, over an earlier run's leftovers.

``fitwatch demo`` plays the whole scenario (about a hundred nights, with refits and a promotion),
which takes seconds of CPU; the tests that need it share one run. The folder it runs in is first
given what an earlier run leaves behind (a database with the model already fitted, a settings
file pointing elsewhere, a mail in the outbox), so the same run also shows that the command
starts afresh in a used folder.
"""

from __future__ import annotations

import contextlib
import io
from dataclasses import dataclass
from pathlib import Path

import pytest

import monitor.demo.run as demo_module
from monitor.config import parse_settings
from monitor.demo.run import DemoResult
from monitor.demo.scenario import TIMEZONE
from monitor.interface.cli import main
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.store.engine import open_engine
from monitor.store.migrate import upgrade_database
from tests.support.world import HISTORY, MODEL, night_after

ROOT = Path(__file__).resolve().parents[2]
STALE_MAIL = "stale-from-an-earlier-run.eml"


@dataclass(frozen=True)
class DemoRun:
    folder: Path
    code: int  # the exit code of ``fitwatch demo --dir FOLDER``
    output: str  # what it printed
    result: DemoResult  # what ``run_demo`` returned to the command


def leave_an_earlier_run(folder: Path) -> None:
    """What a previous demo run leaves in ``folder`` (its own kind of files, other contents)."""
    folder.mkdir(parents=True)
    url = f"sqlite:///{folder / 'fitwatch.db'}"
    engine = open_engine(url)
    try:
        upgrade_database(engine)
        settings = parse_settings({"database": {"url": url},
                                   "schedule": {"timezone": TIMEZONE}}, "<an earlier run>")
        fit_model(settings, FitRequest(MODEL, ROOT / "demo_data" / "history.csv",
                                       "load_minutes", ("pallets",), "docked_at", "load_id"),
                  now=night_after(HISTORY[1]), engine=engine, actor="an earlier run")
    finally:
        engine.dispose()
    (folder / "fitwatch.toml").write_text('[database]\nurl = "sqlite:////nowhere/else.db"\n')
    (folder / "outbox").mkdir()
    (folder / "outbox" / STALE_MAIL).write_text("Subject: from an earlier run\n\nold news\n")


def run_demo_command(folder: Path) -> DemoRun:
    """``fitwatch demo --dir FOLDER`` with its output captured; ``run_demo`` is wrapped (not
    replaced) to keep what it returns to the command."""
    returned: list[DemoResult] = []
    real = demo_module.run_demo

    def keeping(*args, **kwargs) -> DemoResult:
        result = real(*args, **kwargs)
        returned.append(result)
        return result

    printed = io.StringIO()
    with pytest.MonkeyPatch.context() as patch, contextlib.redirect_stdout(printed):
        patch.setattr(demo_module, "run_demo", keeping)
        code = main(["demo", "--dir", str(folder)])
    assert len(returned) == 1, "fitwatch demo no longer calls monitor.demo.run.run_demo"
    return DemoRun(folder, code, printed.getvalue(), returned[0])
