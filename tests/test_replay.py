"""Replay runs the same day loop as the nightly check, in memory, over a history file."""

from __future__ import annotations

import json
from datetime import date
from pathlib import Path

import pandas as pd
import pytest

from monitor.config import load_settings
from monitor.domain.model import ModelSpec
from monitor.interface.cli import main
from monitor.monitoring.replay import replay
from tests.support.demo import DemoRun

ROOT = Path(__file__).resolve().parents[1]
COLUMNS = ModelSpec("dock_loading", "load_minutes", ("pallets",), "docked_at", "load_id")


@pytest.fixture(scope="module")
def all_loads(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The committed demo data as one history file (as an export of everything would be)."""
    data = ROOT / "demo_data"
    frames = [pd.read_csv(data / "history.csv", dtype=str)]
    frames += [pd.read_csv(p, dtype=str) for p in sorted((data / "nights").glob("*.csv"))]
    path = tmp_path_factory.mktemp("replay") / "all_loads.csv"
    pd.concat(frames, ignore_index=True).to_csv(path, index=False)
    return path


@pytest.mark.slow
def test_replay_equals_the_nights_of_the_demo(demo: DemoRun, all_loads: Path) -> None:
    nightly = demo.result  # the session's one demo run (tests/support/demo.py)
    settings = load_settings(nightly.config)
    report = replay(settings, "dock_loading", all_loads, fit_end=date(2026, 3, 8))
    assert [c.day for c in report.checks] == [c.day for c in nightly.checks]
    # the demo's planning lead promotes a refit; the replay keeps version 1 throughout
    until = nightly.promotions[0].effective_day
    same = [(a, b) for a, b in zip(report.checks, nightly.checks, strict=True) if a.day < until]
    assert len(same) > 30
    for ours, theirs in same:
        assert (ours.n, ours.covered, ours.status) == (theirs.n, theirs.covered, theirs.status)
        assert ours.cusum_upper == pytest.approx(theirs.cusum_upper, rel=1e-9, abs=1e-12)
        assert ours.reasons == theirs.reasons
    assert report.rows.duplicates == 1 and report.rows.rejected == 1


def test_acknowledging_each_refit_counts_episodes(tmp_path: Path, all_loads: Path) -> None:
    settings = load_settings(None, environ={}, cwd=tmp_path)
    held = replay(settings, "dock_loading", all_loads, columns=COLUMNS,
                  fit_end=date(2026, 3, 8))
    acked = replay(settings, "dock_loading", all_loads, columns=COLUMNS,
                   fit_end=date(2026, 3, 8), acknowledge_refits=True)
    first_refit = next(c.day for c in held.checks if c.status == "refit")
    assert len(held.episodes()) == 1 and held.episodes()[0].first_day == first_refit
    assert held.episodes()[0].last_day == held.checks[-1].day
    # acknowledged or not, the change keeps the evidence above threshold
    assert acked.episodes()[0].first_day == first_refit
    assert not any(r.startswith("refit advised since") for c in acked.checks
                   for r in c.reasons)


def test_replay_command_without_a_database(tmp_path: Path, all_loads: Path, capsys,
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)  # default settings: a database that does not exist here
    code = main(["replay", "dock_loading", str(all_loads), "--y", "load_minutes", "--x",
                 "pallets", "--time", "docked_at", "--id", "load_id", "--fit-end",
                 "2026-03-08", "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert code == 0 and doc["rows"]["read"] == 9018
    assert doc["episodes"][0]["status"] == "refit"
    assert doc["version"]["coefficients"].keys() == {"intercept", "pallets"}
    assert not (tmp_path / "fitwatch.db").exists()  # replay stores nothing


def test_replay_usage_errors_are_one_line(tmp_path: Path, all_loads: Path, capsys,
                                          monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    assert main(["replay", "dock_loading", str(all_loads), "--y", "load_minutes"]) == 1
    assert "--y, --x and --time" in capsys.readouterr().err
    assert main(["replay", "dock_loading", str(all_loads)]) == 1
    err = capsys.readouterr().err
    assert "--y, --x and --time" in err and "Traceback" not in err
    assert main(["replay", "dock_loading", str(all_loads), "--y", "load_minutes", "--x",
                 "pallets", "--time", "docked_at", "--fit-end", "2027-01-01"]) == 1
    assert "nothing to check" in capsys.readouterr().err
