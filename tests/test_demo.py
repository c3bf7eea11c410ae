"""The demo: its data come from the seeded generator, and the whole scenario runs end to end."""

from __future__ import annotations

import io
from pathlib import Path

from monitor.demo.run import run_demo
from monitor.demo.scenario import Scenario, generate_demo
from monitor.interface.cli import main

ROOT = Path(__file__).resolve().parents[1]


def test_committed_demo_data_is_what_the_generator_writes(tmp_path: Path) -> None:
    files = generate_demo(tmp_path)
    committed = ROOT / "demo_data"
    assert (committed / "history.csv").read_bytes() == files.history.read_bytes()
    names = sorted(p.name for p in (committed / "nights").iterdir())
    assert names == sorted(p.name for p in files.nights)
    for path in files.nights:
        assert (committed / "nights" / path.name).read_bytes() == path.read_bytes()


def test_demo_runs_end_to_end_and_finds_the_layout_change(tmp_path: Path) -> None:
    out = io.StringIO()
    result = run_demo(tmp_path / "demo", out=out)
    text = out.getvalue()
    scenario = Scenario()
    before = [c for c in result.checks if c.day < scenario.layout_change]
    assert before and all(c.status == "ok" for c in before)
    first_refit = next(c for c in result.checks if c.status == "refit")
    assert 0 <= (first_refit.day - scenario.layout_change).days <= 3
    assert "each pallet now adds" in text.lower()
    assert "1 duplicate skipped, 1 rejected" in text  # the faulty export night
    # the lead refits, compares and promotes; the new version holds until the spread changes
    promoted = result.promotions[0]
    assert promoted.active == 2 and result.comparisons[0].recommendation.action == "promote"
    between = [c for c in result.checks
               if promoted.effective_day <= c.day < scenario.spread_change]
    assert len(between) > 14 and all(c.status == "ok" for c in between)
    # once twice the days exist, status suggests pinning the new line down on all of them
    sharpened = [c for c in result.comparisons
                 if "bias chart limit drops" in c.recommendation.sentence]
    assert sharpened and sharpened[0].candidate.cusum_h < sharpened[0].active.cusum_h / 2
    assert "would sharpen it" in text
    after = [c for c in result.checks if c.day > scenario.spread_change]
    assert after[0].status in ("watch", "refit")
    # the planning lead was told by e-mail (written as .eml files: no SMTP in the demo)
    assert 'e-mail to the planning lead: "fitwatch: dock_loading needs a refit"' in text
    assert len(list((tmp_path / "demo" / "outbox").glob("*.eml"))) >= 2
    # the demo leaves a working setup behind: its settings file and database answer commands
    assert main(["--config", str(result.config), "status"]) == 0


def test_demo_command_runs_twice_in_the_same_folder(tmp_path: Path, capsys) -> None:
    target = tmp_path / "again"
    assert main(["demo", "--dir", str(target)]) == 0
    first = capsys.readouterr().out
    assert main(["demo", "--dir", str(target)]) == 0
    assert capsys.readouterr().out == first
