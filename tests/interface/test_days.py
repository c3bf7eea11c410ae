"""``days``: the stored figures of past checks as a time series (text, JSON, CSV).

The world: the demo model (invented data from the project's own generator) checked through
12 April by version 1 and on 13 April by the promoted version 2; a second model, fitted on the
same history, checked on 8 (a Sunday, no loads) to 11 March.
"""

from __future__ import annotations

import io
import json
from datetime import date
from pathlib import Path

import pandas as pd
import pytest
from sqlalchemy import Engine

from monitor.errors import ExitCode
from monitor.ingest.service import ingest_file, options_for
from monitor.interface.check_view import FIGURE_COLUMNS
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.monitoring.check import run_checks
from monitor.store.checks import load_checks
from monitor.store.models import get_model, list_models
from tests.support.snapshots import WorldCache
from tests.support.world import (
    CHANGED,
    FIT_CANDIDATE,
    HISTORY,
    LAST_DAY,
    MODEL,
    NEW_DAY,
    PROMOTE_AND_ADD_A_DAY,
    REACH_REFIT,
    World,
    loads_between,
    night_after,
    settings_for,
    write_csv,
)

OTHER = "dock_east"
OTHER_DAYS = (date(2026, 3, 9), date(2026, 3, 11))


def _check_the_new_day_and_a_second_model(world: World) -> None:
    assert world.check(NEW_DAY).checks[-1].day == NEW_DAY
    history = write_csv(loads_between(CHANGED, *HISTORY, 5), world.tmp / "east.csv")
    fit_model(world.settings, FitRequest(OTHER, history, "load_minutes", ("pallets",),
                                         "docked_at", "load_id"),
              now=night_after(HISTORY[1]), engine=world.engine, actor="test")
    nights = write_csv(loads_between(CHANGED, *OTHER_DAYS, 6), world.tmp / "east_nights.csv")
    with world.engine.connect() as conn:
        other = get_model(conn, OTHER)
    ingest_file(world.engine, other, nights,
                options_for(world.settings, OTHER, now=night_after(OTHER_DAYS[1])))
    run_checks(world.settings, [OTHER], through=OTHER_DAYS[1], now=night_after(OTHER_DAYS[1]),
               engine=world.engine)


CHECKED_TWO_MODELS = ("13 April checked by version 2; dock_east fitted and checked 8-11 March",
                      _check_the_new_day_and_a_second_model)


@pytest.fixture
def world(worlds: WorldCache, engine: Engine, make_settings, tmp_path: Path) -> World:
    return worlds.world(engine, settings_for(make_settings, engine), tmp_path, CHANGED, 71,
                        (REACH_REFIT, FIT_CANDIDATE, PROMOTE_AND_ADD_A_DAY, CHECKED_TWO_MODELS))


def _stored(world: World) -> dict[tuple[str, date], object]:
    with world.engine.connect() as conn:
        return {(m.name, c.day): c for m in list_models(conn)
                for c in load_checks(conn, m.id, model=m.name)}


def test_csv_has_one_row_per_model_and_checked_day(cli, world: World) -> None:
    code, out, err = cli("days", "--csv")
    assert code == 0, err
    table = pd.read_csv(io.StringIO(out), keep_default_na=False, na_values=[""])
    stored = _stored(world)
    assert tuple(table.columns) == FIGURE_COLUMNS
    keys = list(zip(table["model"], table["day"].map(date.fromisoformat), strict=True))
    assert keys == sorted(stored)  # every stored check once, by model, then day
    assert table["model"].nunique() == 2 and len(keys) == len(set(keys))
    for row in table.itertuples(index=False):
        check = stored[(row.model, date.fromisoformat(row.day))]
        assert (row.n, row.covered, row.missed) == (check.n, check.covered,
                                                    check.n - check.covered)
        assert row.status == check.status.value
        assert row.cusum_h == check.cusum_h and row.cusum_upper == check.cusum_upper
        assert row.cusum_value == max(check.cusum_upper, check.cusum_lower)
    version = dict(zip(keys, table["version"], strict=True))
    assert version[(MODEL, LAST_DAY)] == 1 and version[(MODEL, NEW_DAY)] == 2
    assert {version[k] for k in keys if k[0] == OTHER} == {1}


def test_json_entries_are_the_check_json_entries_plus_version(cli, world: World) -> None:
    code, out, err = cli("days", MODEL, "--from", "2026-04-11", "--through", "2026-04-13",
                         "--json")
    assert code == 0, err
    entries = json.loads(out)
    assert [e["day"] for e in entries] == ["2026-04-11", "2026-04-12", "2026-04-13"]
    assert [e["version"] for e in entries] == [1, 1, 2]
    # the same figures 'check --json --day' reports for a checked day (status and figures)
    code, out, err = cli("check", MODEL, "--day", "2026-04-12", "--json")
    assert code == 0, err
    (checked,) = json.loads(out)
    for key in ("model", "day", "n", "covered", "coverage", "status", "reasons"):
        assert entries[1][key] == checked[key]
    for key, value in checked["cusum"].items():
        assert entries[1]["cusum"][key] == value
    assert entries[1]["slope"] == checked["slope"] and entries[1]["window"] == checked["window"]


def test_every_json_figure_has_a_csv_column(cli, world: World) -> None:
    entry = json.loads(cli("days", MODEL, "--from", "2026-04-12", "--through", "2026-04-12",
                           "--json")[1])[0]
    leaves = set()
    for key, value in entry.items():
        if isinstance(value, dict):
            for inner in value:
                if inner == "wilson":
                    leaves |= {f"{key}_wilson_low", f"{key}_wilson_high"}
                else:
                    leaves.add(f"{key}_{inner}")
        else:
            leaves.add(key)
    assert leaves == set(FIGURE_COLUMNS)
    row = pd.read_csv(io.StringIO(cli("days", MODEL, "--from", "2026-04-12", "--through",
                                      "2026-04-12", "--csv")[1]))
    assert row["window_wilson_low"][0] == entry["window"]["wilson"][0]
    assert row["reasons"][0] == " | ".join(entry["reasons"])


def test_names_and_range_narrow_the_series(cli, world: World) -> None:
    code, out, _ = cli("days", OTHER, "--csv")
    table = pd.read_csv(io.StringIO(out))
    assert code == 0 and set(table["model"]) == {OTHER}
    # its fit window ends on 7 March: the Sunday 8 March (no loads) is its first checked day
    assert table["day"].tolist() == ["2026-03-08", "2026-03-09", "2026-03-10", "2026-03-11"]
    code, out, _ = cli("days", OTHER, "--from", "2026-03-10", "--through", "2026-03-10")
    assert code == 0 and "2026-03-10" in out and "2026-03-09" not in out
    assert out.startswith(f"{OTHER}:") and "v1" in out
    code, out, _ = cli("days", OTHER, "--from", "2027-01-01", "--csv")
    assert code == 0 and out.splitlines() == [",".join(FIGURE_COLUMNS)]  # a header only


@pytest.mark.parametrize(("argv", "says"), [
    (("days", "no_such_model"), "no model named 'no_such_model'"),
    (("days", "--from", "2026-04-12", "--through", "2026-04-01"), "is after the last day"),
    (("days", "--from", "12/04/2026"), "is not a date (YYYY-MM-DD)"),
    (("days", "--csv", "--json"), "not allowed with"),
])
def test_clear_errors_with_exit_code_1(cli, world: World, argv, says) -> None:
    code, out, err = cli(*argv)
    assert code == ExitCode.INPUT == 1
    assert says in err and "Traceback" not in err and out == ""
