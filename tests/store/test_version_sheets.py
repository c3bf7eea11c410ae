"""A version's sheet read from its columns says what the whole stored version says.

``model show`` reads a version through ``monitor.store.version_sheets`` (plain JSON, no numpy);
``model fit``, ``refit``, ``compare``, ``replay`` and the model's page build the same sheet from
the whole decoded version (``Version.sheet``). These tests hold the two readings together on
stored versions of each kind: fitted and self-starting (with its fit-window tests, day effects
and slope-chart limits), imported (none of those), and on the learning of the last check. Both
readings come from the same rows, so agreement is the check (common practice, no source).
"""

from __future__ import annotations

import json
import shutil
from datetime import UTC, datetime
from pathlib import Path

import pytest
from sqlalchemy import update

from monitor.config import load_settings
from monitor.domain.codec import encode
from monitor.domain.model import ModelSpec
from monitor.errors import NotFoundError, StateError
from monitor.stats.self_start import Learning
from monitor.store.access import database
from monitor.store.checks import last_check
from monitor.store.engine import open_engine
from monitor.store.models import create_model, get_model
from monitor.store.schema import day_checks
from monitor.store.version_sheets import LearnedSoFar, learned_so_far, version_sheet
from monitor.store.versions import active_version, get_version, list_versions
from tests.support.demo import DemoRun


@pytest.fixture
def demo_engine(demo: DemoRun, tmp_path: Path):
    path = tmp_path / "fitwatch.db"
    shutil.copyfile(demo.folder / "fitwatch.db", path)
    engine = open_engine(f"sqlite:///{path}")
    yield engine
    engine.dispose()


def test_every_demo_version_reads_the_same_as_a_sheet_and_whole(demo_engine) -> None:
    with demo_engine.connect() as conn:
        model = get_model(conn, "dock_loading")
        versions = list_versions(conn, model.id)
        assert len(versions) >= 2
        for version in versions:
            sheet = version_sheet(conn, model.id, version.number)
            assert encode(sheet) == encode(version.sheet()), version.number
        active = active_version(conn, model.id)
        assert active is not None
        # without a number: the active version
        assert version_sheet(conn, model.id).number == active.number
        # what is compared above is not empty: the active version carries every part
        sheet = version_sheet(conn, model.id)
        base = sheet.baseline
        assert base.diagnosis is not None and base.calibration is not None
        assert base.slope_limits is not None and base.day_effects is not None
        assert sheet.line.std_errors is not None and sheet.line.x_min is not None


def test_the_learning_of_the_last_check_reads_the_same_in_part_and_whole(demo_engine) -> None:
    with demo_engine.connect() as conn:
        model = get_model(conn, "dock_loading")
        last = last_check(conn, model.id)
        assert last is not None
        learned = learned_so_far(conn, model.id, last.version_id)
        assert learned == LearnedSoFar.of(last.state.learning)
        assert learned is not None and learned.level_days > 0  # the demo's version learns
        other = next(v.id for v in list_versions(conn, model.id) if v.id != last.version_id)
        assert learned_so_far(conn, model.id, other) is None


def test_a_check_stored_before_versions_learned_reads_as_the_default_learning(
        demo_engine) -> None:
    with demo_engine.begin() as conn:
        model = get_model(conn, "dock_loading")
        last = last_check(conn, model.id)
        assert last is not None
        state = {k: v for k, v in encode(last.state).items() if k != "learning"}
        conn.execute(update(day_checks).where(day_checks.c.model_id == model.id,
                                              day_checks.c.day == last.day).values(state=state))
        again = last_check(conn, model.id)
        assert again is not None
        assert learned_so_far(conn, model.id, last.version_id) \
            == LearnedSoFar.of(again.state.learning) == LearnedSoFar.of(Learning())


def _import(cli, folder: Path) -> None:
    """A version fitted elsewhere: coefficients, s and dof only (no window, no day effects)."""
    doc = {"response": "load_minutes", "predictors": ["pallets"], "time_column": "docked_at",
           "id_column": "load_id", "s": 6.2, "dof": 120,
           "coefficients": {"intercept": 11.5, "pallets": 2.3}, "fit_end": "2026-03-08"}
    path = folder / "fitted_elsewhere.json"
    path.write_text(json.dumps(doc))
    code, _, err = cli("model", "import", "dock_loading", str(path))
    assert code == 0, err


def test_an_imported_version_reads_the_same_as_a_sheet_and_whole(cli, tmp_path: Path) -> None:
    _import(cli, tmp_path)
    with database(load_settings(cli.config)) as engine, engine.connect() as conn:
        model = get_model(conn, "dock_loading")
        version = get_version(conn, model.id, 1)
        sheet = version_sheet(conn, model.id)
        assert encode(sheet) == encode(version.sheet())
        assert sheet.baseline.diagnosis is None and sheet.line.std_errors is None
        assert learned_so_far(conn, model.id, sheet.id) is None  # never checked


def test_a_missing_version_and_a_model_without_versions_are_named(cli, tmp_path: Path) -> None:
    _import(cli, tmp_path)
    with database(load_settings(cli.config)) as engine, engine.begin() as conn:
        model = get_model(conn, "dock_loading")
        with pytest.raises(NotFoundError, match=r"has no version 3; versions: 1$"):
            version_sheet(conn, model.id, 3, model_name="dock_loading")
        waiting = create_model(conn, ModelSpec("waiting", "minutes", ("pallets",), "at"),
                               datetime(2026, 3, 8, tzinfo=UTC))
        with pytest.raises(StateError, match="'waiting' has no fitted version yet"):
            version_sheet(conn, waiting.id, model_name="waiting")
        with pytest.raises(NotFoundError, match=r"has no version 1; versions: none$"):
            version_sheet(conn, waiting.id, 1, model_name="waiting")
