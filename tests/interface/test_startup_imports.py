"""The quick commands answer at once: they never import the heavy libraries they do not use.

Each command runs in a fresh interpreter (``python -c``, this checkout's code) against a copy of
the demo database and prints the heavy modules it ended up with. What counts as heavy, with its
import cost on the project's 2-core machine (``python -X importtime``, Python 3.11): scipy's
submodules (stats alone about 0.5 s), pandas (about 0.3 s), matplotlib, Jinja2, pyarrow,
Alembic (about 0.15 s), the PostgreSQL driver and dialect for an SQLite database (about
30 ms), APScheduler (about 25 ms; the asyncio under it is SQLAlchemy's too), tqdm. ``status``
reports the schedule, so it is the one command here that may use APScheduler with the default
schedule; a schedule of one's own is parsed by it when the settings load, in every command.
``model list``, ``status`` and ``model show`` go further: they read version numbers, the last
status, the active version's head (its days, fit days and chart limits) and a version's sheet
(its line's figures and its fit window's stored summary) from their columns and JSON, and the
data findings need only day counts and the file batches, so they load neither numpy (about
0.05 s on that machine) nor scipy nor the day check's types and the charts' statistics (a rising
rejection share, which takes the binomial tail, loads them when recent files lost rows).
Start-up times are measured by ``tests/benchmarks/bench_startup.py``, not asserted here (a busy
machine would make that flaky).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from tests.support.demo import DemoRun

ROOT = Path(__file__).resolve().parents[2]

HEAVY = ("scipy.stats", "scipy.linalg", "scipy.optimize", "scipy.signal", "scipy.fft",
         "scipy.special", "scipy.integrate", "pandas", "matplotlib", "jinja2", "pyarrow",
         "alembic", "psycopg", "sqlalchemy.dialects.postgresql", "apscheduler", "tqdm")

PROBE = """
import io, json, sys
from contextlib import redirect_stdout
from monitor.interface.cli import main
with redirect_stdout(io.StringIO()) as out:
    code = main(sys.argv[1:])
heavy = sorted(m for m in {heavy!r} if m in sys.modules)
ours = sorted(m for m in sys.modules if m in ("numpy", "scipy") or m.startswith("monitor."))
print(json.dumps({{"code": code, "heavy": heavy, "ours": ours, "printed": len(out.getvalue())}}))
"""


def loaded_by(argv: list[str], cwd: Path) -> dict[str, object]:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    env.pop("FITWATCH_CONFIG", None)
    result = subprocess.run([sys.executable, "-c", PROBE.format(heavy=HEAVY), *argv], cwd=cwd,
                            env=env, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    return json.loads(result.stdout.splitlines()[-1])


@pytest.fixture
def config(demo: DemoRun, tmp_path: Path) -> Path:
    shutil.copyfile(demo.folder / "fitwatch.db", tmp_path / "fitwatch.db")
    path = tmp_path / "fitwatch.toml"
    path.write_text(f'[database]\nurl = "sqlite:///{tmp_path / "fitwatch.db"}"\n'
                    '[schedule]\ntimezone = "Europe/Berlin"\n')
    return path


@pytest.mark.parametrize("argv, allowed", [
    (["status"], {"apscheduler", "asyncio"}),
    (["status", "--json"], {"apscheduler", "asyncio"}),
    (["model", "list"], set()),
    (["model", "show", "dock_loading"], set()),
    (["model", "show", "dock_loading", "--json"], set()),
])
def test_quick_commands_leave_the_heavy_libraries_alone(config: Path, argv: list[str],
                                                         allowed: set[str]) -> None:
    seen = loaded_by(["--config", str(config), *argv], config.parent)
    assert seen["code"] == 0 and seen["printed"], seen  # it did its work
    assert set(seen["heavy"]) <= allowed, f"{argv} imported {seen['heavy']}"


# the data findings' own statistics, plain Python (status shows the findings), and the fit
# window's stored summary (model show shows it)
PLAIN_STATISTICS = ("monitor.stats", "monitor.stats.silence", "monitor.stats.rejection_rise",
                    "monitor.stats.window_summary")


@pytest.mark.parametrize("argv", [["model", "list"], ["model", "list", "--json"], ["status"],
                                  ["status", "--json"], ["model", "show", "dock_loading"],
                                  ["model", "show", "dock_loading", "--json"],
                                  ["model", "show", "dock_loading", "--version", "1"]])
def test_the_quick_views_need_no_numpy(config: Path, argv: list[str]) -> None:
    seen = loaded_by(["--config", str(config), *argv], config.parent)
    assert seen["code"] == 0 and seen["printed"], seen
    numeric = [m for m in seen["ours"] if m in ("numpy", "scipy")
               or (m.startswith("monitor.stats") and m not in PLAIN_STATISTICS)]
    assert numeric == [], f"{argv} imported {numeric}"


# what a day check is made of: status reads the last status from its columns and the active
# version's stored figures, model show a version's sheet and the learning part of the last
# check's state, so none of it loads (the statistics of the data findings do)
CHECK_MACHINERY = ("monitor.domain.check", "monitor.monitoring.wording", "monitor.store.checks",
                   "monitor.stats.change", "monitor.stats.cusum", "monitor.stats.decision",
                   "monitor.stats.calibration", "monitor.stats.arl", "monitor.stats.ols",
                   "monitor.stats.prediction", "monitor.stats.coverage")


@pytest.mark.parametrize("argv", [["status"], ["status", "--json"],
                                  ["model", "show", "dock_loading"]])
def test_status_and_model_show_leave_the_check_machinery_alone(config: Path,
                                                               argv: list[str]) -> None:
    seen = loaded_by(["--config", str(config), *argv], config.parent)
    assert seen["code"] == 0 and seen["printed"], seen
    loaded = [m for m in CHECK_MACHINERY if m in seen["ours"]]
    assert loaded == [], f"{argv} imported {loaded}"


def test_help_imports_nothing_heavy_not_even_numpy(tmp_path: Path) -> None:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    probe = ("import sys\nfrom monitor.interface.cli import main\n"
             "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
             "print(sorted(m for m in ('numpy', 'sqlalchemy', *{heavy!r}) if m in sys.modules))")
    result = subprocess.run([sys.executable, "-c", probe.format(heavy=HEAVY)], cwd=tmp_path,
                            env=env, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    assert "usage: fitwatch" in result.stdout
    assert result.stdout.splitlines()[-1] == "[]"


def test_a_schedule_of_ones_own_is_parsed_when_the_settings_load(config: Path) -> None:
    # a weekday schedule: only the scheduler library is added, to parse it
    text = config.read_text().replace("[schedule]\n", '[schedule]\ncron = "30 2 * * mon-sat"\n')
    config.write_text(text)
    seen = loaded_by(["--config", str(config), "model", "list"], config.parent)
    assert seen["code"] == 0 and set(seen["heavy"]) <= {"apscheduler", "asyncio"}, seen


@pytest.mark.parametrize("enabled", [True, False])
def test_a_quick_view_gives_the_garbage_collector_back_as_it_found_it(
        config: Path, enabled: bool, capsys: pytest.CaptureFixture[str]) -> None:
    import gc

    from monitor.interface.cli import main
    gc.enable() if enabled else gc.disable()
    try:
        assert main(["--config", str(config), "model", "list"]) == 0
        assert "dock_loading" in capsys.readouterr().out
        assert gc.isenabled() is enabled
    finally:
        gc.enable()
