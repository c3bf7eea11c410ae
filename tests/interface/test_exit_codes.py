"""Every exit code of the real command line, and the error that leads to it.

The codes are the README's ("Exit codes: 0 done, 1 bad input, usage, settings, state or
database, 2 internal error, 3 ``check --fail-on`` reached its threshold, 130 interrupted").
Subprocess runs (``python -m monitor``) show what a user sees on stderr: one line, no traceback.
In-process runs (``main``) are used where a fault has to be injected to reach a code.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from collections.abc import Callable
from datetime import date
from pathlib import Path

import pytest

import monitor.interface.status as status_module
import monitor.monitoring.check as check_module
from monitor.config import load_settings
from monitor.errors import (
    ConfigError,
    DatabaseError,
    DegenerateDataError,
    ExitCode,
    FitwatchError,
    InputError,
    NotFoundError,
    StateError,
    UsageError,
)
from monitor.interface.cli import main

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo_data"
NIGHTS = sorted((DEMO / "nights").glob("loads_2026-0[34]-*.csv"))
MODEL, OTHER = "dock_loading", "dock_copy"
FIT = ["--y", "load_minutes", "--x", "pallets", "--time", "docked_at", "--id", "load_id"]


def run_cli(*argv: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    """``python -m monitor ARGV`` on this checkout's code (not whatever else is installed)."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    env.pop("FITWATCH_CONFIG", None)
    return subprocess.run([sys.executable, "-m", "monitor", *argv], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=120)


def settings_file(folder: Path, url: str, extra: str = "") -> Path:
    path = folder / "fitwatch.toml"
    path.write_text(f'[database]\nurl = "{url}"\n[schedule]\ntimezone = "Europe/Berlin"\n{extra}')
    return path


@pytest.fixture(scope="module")
def template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A database with the demo model fitted on its history (and a copy of it under another
    name), and the demo's nights from 9 March to 4 April 2026 stored for the first."""
    path = tmp_path_factory.mktemp("world") / "fitwatch.db"
    url = f"sqlite:///{path}"
    history = str(DEMO / "history.csv")
    for argv in (["init"], ["model", "fit", MODEL, "--data", history, *FIT],
                 ["model", "fit", OTHER, "--data", history, *FIT],
                 ["ingest", MODEL, *(str(p) for p in NIGHTS if p.name <= "loads_2026-04-04")]):
        assert main(["--db", url, *argv]) == 0, argv
    return path


@pytest.fixture
def world(template: Path, tmp_path: Path) -> Path:
    """A settings file for a fresh copy of the template database."""
    path = tmp_path / "fitwatch.db"
    shutil.copyfile(template, path)
    return settings_file(tmp_path, f"sqlite:///{path}")


@pytest.fixture
def cli(world: Path, capsys: pytest.CaptureFixture[str]) -> Callable[..., tuple[int, str, str]]:
    def run(*argv: str) -> tuple[int, str, str]:
        code = main(["--config", str(world), *argv])
        captured = capsys.readouterr()
        return code, captured.out, captured.err
    return run


# 0 ----------------------------------------------------------------------------------------------
def test_0_when_done(tmp_path: Path) -> None:
    result = run_cli("--db", f"sqlite:///{tmp_path / 'new.db'}", "init", cwd=tmp_path)
    assert result.returncode == ExitCode.OK == 0, result.stderr
    assert result.stdout.startswith("database created at revision")


# 1 ----------------------------------------------------------------------------------------------
def test_1_for_usage_one_line_and_no_traceback(tmp_path: Path) -> None:
    result = run_cli("frobnicate", cwd=tmp_path)
    assert result.returncode == UsageError.exit_code == 1
    assert result.stderr.count("\n") == 1 and "invalid choice: 'frobnicate'" in result.stderr


@pytest.mark.parametrize("command", [["status"], ["daemon", "--once"], ["init"],
                                     ["check"], ["model", "list"]])
def test_1_for_a_cron_the_scheduler_refuses_naming_the_key_and_the_file(
        tmp_path: Path, command: list[str]) -> None:
    # status and daemon once printed a traceback and exited with 2, and check went on with
    # exit 0; the schedule is now parsed when the settings load, whatever the command
    config = settings_file(tmp_path, f"sqlite:///{tmp_path / 'f.db'}", 'cron = "99 99 * * *"\n')
    result = run_cli("--config", str(config), *command, cwd=tmp_path)
    assert result.returncode == ConfigError.exit_code == 1
    assert "Traceback" not in result.stderr and result.stderr.count("\n") == 1
    # crontab(5): the minute field takes 0-59
    assert str(config) in result.stderr and "'schedule.cron'" in result.stderr
    assert "minute field '99'" in result.stderr


def test_options_may_come_before_the_files(cli) -> None:
    # argparse ends a list of positionals at the first option: "ingest NAME --strict FILE" was
    # "unrecognized arguments"; the files after the options now join the list
    later = [str(p) for p in NIGHTS if "2026-04-06" <= p.name[6:16] <= "2026-04-07"]
    code, out, err = cli("ingest", MODEL, "--strict", *later)
    assert code == 0 and out.count("stored") == 2, err
    code, _, err = cli("ingest", MODEL, "--bogus", later[0])
    assert code == UsageError.exit_code and "unrecognized arguments: --bogus" in err


def test_1_for_an_unknown_model(cli) -> None:
    code, _, err = cli("model", "show", "nope")
    assert code == NotFoundError.exit_code == 1 and err.startswith("fitwatch: ") and "nope" in err
    code, _, err = cli("check", "nope", "--through", "2026-03-20")
    assert code == 1 and "nope" in err


@pytest.mark.parametrize("error", [ConfigError("bad", key="k"), UsageError("bad"),
                                   InputError("bad"), DegenerateDataError("bad"),
                                   NotFoundError("bad"), StateError("bad"),
                                   DatabaseError("bad")])
def test_the_command_line_exits_with_the_code_the_error_carries(
        cli, monkeypatch: pytest.MonkeyPatch, error: FitwatchError) -> None:
    def fail(*args, **kwargs):
        raise error

    monkeypatch.setattr(status_module, "model_statuses", fail)
    code, out, err = cli("status")
    assert code == error.exit_code == ExitCode.INPUT
    assert err == f"fitwatch: {error}\n" and out == ""


def test_an_error_class_with_its_own_code_is_obeyed(cli, monkeypatch) -> None:
    class Refusal(FitwatchError):
        exit_code = ExitCode.THRESHOLD  # any code other than 1 shows the CLI reads the field

    def fail(*args, **kwargs):
        raise Refusal("no")

    monkeypatch.setattr(status_module, "model_statuses", fail)
    assert cli("status")[0] == 3


# 2 ----------------------------------------------------------------------------------------------
def test_2_for_a_bug_with_the_traceback_in_the_log(
        cli, monkeypatch: pytest.MonkeyPatch, caplog: pytest.LogCaptureFixture) -> None:
    def bug(*args, **kwargs):
        raise ZeroDivisionError("division by zero")

    monkeypatch.setattr(status_module, "model_statuses", bug)
    code, _, err = cli("status")
    assert code == ExitCode.INTERNAL == 2
    assert err == "fitwatch: internal error (details above); please report it\n"
    assert any(r.exc_info and r.exc_info[0] is ZeroDivisionError for r in caplog.records)


def _failing_for(name: str, error: Exception) -> Callable[..., object]:
    real = check_module.check_model

    def check_model(engine, model, *args, **kwargs):
        if model.name == name:
            raise error
        return real(engine, model, *args, **kwargs)
    return check_model


def test_2_when_one_model_fails_internally_and_the_others_are_still_checked(
        cli, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(check_module, "check_model",
                        _failing_for(OTHER, KeyError("a bug")))
    code, out, _ = cli("check", "--through", "2026-03-20")
    assert code == ExitCode.INTERNAL
    assert f"{MODEL}: checked 2026-03-08 .. 2026-03-20 (13 day(s))" in out
    assert f"{OTHER}: not checked: internal error: KeyError('a bug')" in out


def test_a_failure_recorded_for_one_model_keeps_the_code_of_its_error(
        cli, world: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the same run as above, but the failure is a fitwatch error: input (1), not internal (2)
    monkeypatch.setattr(check_module, "check_model",
                        _failing_for(OTHER, StateError("no active version")))
    code, out, _ = cli("check", "--through", "2026-03-20")
    assert code == ExitCode.INPUT
    assert f"{OTHER}: not checked: no active version" in out


@pytest.mark.parametrize("error,code", [(KeyError("a bug"), ExitCode.INTERNAL),
                                        (StateError("internal state"), ExitCode.INPUT)])
def test_the_kind_of_a_failure_is_a_field_not_read_from_its_text(
        world: Path, monkeypatch: pytest.MonkeyPatch, error: Exception, code: ExitCode) -> None:
    # a fitwatch error whose text starts with "internal" is still the user's (exit code 1)
    monkeypatch.setattr(check_module, "check_model", _failing_for(OTHER, error))
    outcome = check_module.run_checks(load_settings(world), through=date(2026, 3, 20))
    failed = {r.model: r.failure for r in outcome.results}
    assert failed[MODEL] is None and failed[OTHER] is not None
    assert failed[OTHER].exit_code == code and failed[OTHER].internal == (code == 2)
    assert main(["--config", str(world), "check", "--through", "2026-03-20"]) == code


# 3 ----------------------------------------------------------------------------------------------
def test_3_when_check_fail_on_is_reached_and_0_before(cli) -> None:
    # The demo data (demo_data/README.md) change on 23 March 2026; before it nothing is refit.
    code, out, _ = cli("check", MODEL, "--through", "2026-03-20", "--fail-on", "refit")
    assert code == ExitCode.OK and "REFIT" not in out
    code, out, _ = cli("check", MODEL, "--through", "2026-04-04", "--fail-on", "refit")
    assert code == ExitCode.THRESHOLD == 3 and "now REFIT since" in out


def test_check_day_judges_and_words_the_day_it_reports_not_today(cli) -> None:
    # Before: with the model at refit today, --day of a quiet day still exited 3 ("now OK" on
    # screen) and said "checked" for a day an earlier run had checked.
    assert cli("check", MODEL, "--through", "2026-04-04")[0] == ExitCode.OK
    code, out, _ = cli("check", MODEL, "--day", "2026-03-12", "--fail-on", "watch")
    assert code == ExitCode.OK, out
    assert f"{MODEL}: 2026-03-12 (checked before, reported again)" in out
    assert "on 2026-03-12 OK since" in out and "now" not in out
    code, out, _ = cli("check", MODEL, "--day", "2026-04-04", "--fail-on", "refit")
    assert code == ExitCode.THRESHOLD and "on 2026-04-04 REFIT since" in out
    # a day not yet checked is checked now, and said so
    code, out, _ = cli("check", OTHER, "--day", "2026-03-10")
    assert code == ExitCode.OK and f"{OTHER}: 2026-03-10 (checked now)" in out


def test_daemon_once_says_each_run_once(world: Path) -> None:
    # Before, the run's sentence went to the log (stderr) and again to stdout: a terminal or a
    # journal, which see both, showed every line twice.
    result = run_cli("--config", str(world), "daemon", "--once", cwd=world.parent)
    assert result.returncode == ExitCode.OK, result.stderr
    lines = (result.stdout + result.stderr).splitlines()
    runs = [line for line in lines if "model-day(s) checked through" in line]
    assert len(runs) == 1 and " INFO monitor.runtime.daemon: nightly run: " in runs[0], lines
    assert result.stdout == ""


def test_check_with_no_models_says_so(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'empty.db'}"
    assert main(["--db", url, "init"]) == 0
    result = run_cli("--db", url, "check", "--through", "2026-03-10", cwd=tmp_path)
    assert result.returncode == ExitCode.OK
    assert result.stdout.strip() == ("no models to check (fit one with "
                                     "'fitwatch model fit NAME ...')")


def test_alerts_for_a_night_nobody_checked_is_an_error_that_says_what_to_do(cli) -> None:
    code, out, err = cli("alerts", "--night", "2026-03-20")
    assert code == StateError.exit_code == 1 and out == ""
    assert err == ("fitwatch: no model has been checked for the night of 2026-03-20; run "
                   "'fitwatch check --through 2026-03-20' first, then 'fitwatch alerts --night' "
                   "again\n")
    assert cli("check", MODEL, "--through", "2026-03-20")[0] == ExitCode.OK
    code, out, _ = cli("alerts", "--night", "2026-03-20")
    assert code == ExitCode.OK and out


# 130 --------------------------------------------------------------------------------------------
def test_130_when_interrupted(cli, monkeypatch: pytest.MonkeyPatch) -> None:
    # 128 + the signal number for a command ended by a signal, SIGINT being 2 (GNU Bash
    # Reference Manual, "Exit Status"; POSIX signal.h), from memory
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(status_module, "model_statuses", interrupted)
    code, _, err = cli("status")
    assert code == ExitCode.INTERRUPTED == 128 + 2 and err == "fitwatch: interrupted\n"
