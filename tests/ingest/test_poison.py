"""One huge but finite value must not poison a model: values whose squares, summed over a day
and multiplied in the tests, could overflow a double (IEEE 754 binary64, largest about
1.8e308) are rejected at ingest with a reason that states the bound, whatever the ranges.

Before, ``pallets = 1e200`` was stored on a model without ranges; its day statistics
overflowed (1e200 squared is inf) and every later check of the model failed with exit 2.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from datetime import date
from pathlib import Path

import numpy as np
import pytest
from sqlalchemy import Engine, select

from monitor.config import Settings
from monitor.ingest.validate import MAGNITUDE_LIMIT, MAGNITUDE_ROWS
from monitor.interface.cli import main
from monitor.store.models import get_model
from monitor.store.observations import load_day_stats
from monitor.store.schema import rejected_rows
from tests.support.world import CALM, MODEL, World, loads_between, settings_for


def test_the_bound_keeps_products_of_sums_of_squares_finite() -> None:
    worst_sum = MAGNITUDE_ROWS * MAGNITUDE_LIMIT ** 2
    assert np.isfinite(worst_sum * worst_sum) and worst_sum * worst_sum < np.finfo(float).max
    with np.errstate(over="ignore"):
        assert np.isinf(np.float64(1e200) ** 2)  # what the old code stored and then summed


def test_a_huge_value_is_rejected_with_the_bound_and_the_model_stays_checkable(
        engine: Engine, make_settings: Callable[..., Settings], tmp_path: Path,
        capsys: pytest.CaptureFixture[str]) -> None:
    world = World(engine, settings_for(make_settings, engine), tmp_path)  # no ranges
    frame = loads_between(CALM, date(2026, 3, 9), date(2026, 3, 11), 31)
    frame["pallets"] = frame["pallets"].astype(object)
    frame["load_minutes"] = frame["load_minutes"].astype(object)
    frame.loc[3, "pallets"] = "1e200"
    frame.loc[40, "load_minutes"] = "-2.5e61"
    frame.loc[41, "pallets"] = str(MAGNITUDE_LIMIT)  # at the bound: a number like any other
    path = tmp_path / "poison.csv"
    frame.to_csv(path, index=False)
    config = tmp_path / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{engine.url.render_as_string(hide_password=False)}"\n'
                      '[schedule]\ntimezone = "Europe/Berlin"\n')
    capsys.readouterr()
    assert main(["--config", str(config), "ingest", MODEL, str(path), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["rejected"] == 2 and summary["accepted"] == len(frame) - 2
    with engine.connect() as conn:
        model = get_model(conn, MODEL)
        rejected = conn.execute(select(rejected_rows).order_by(rejected_rows.c.line)).all()
        stats = load_day_stats(conn, model)
    assert [(r.line, r.reason) for r in rejected] == [(5, "too_large"), (42, "too_large")]
    assert "1e+60" in rejected[0].detail and "1e+12 rows" in rejected[0].detail
    assert np.isfinite(stats.moments.comoment).all()
    capsys.readouterr()
    assert main(["--config", str(config), "check", "--through", "2026-03-11", "--json"]) == 0
    checks = json.loads(capsys.readouterr().out)
    assert [c["day"] for c in checks][-1] == "2026-03-11"
    assert world.check(date(2026, 3, 11)).checks == []  # nothing left, nothing failed
