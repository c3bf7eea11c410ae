"""``rows``: a day's rows scored as the check scored them, and rejected rows, from the command line.

The world: the demo model (invented data from the project's own generator) with a slope change
on 16 March, checked through 12 April by version 1; version 2, fitted on 16 March to 12 April,
promoted (it scores from 13 April); 13 April's loads ingested but not checked, with one load far
beyond the fitted pallet range and one unreadable row.
"""

from __future__ import annotations

import csv
import io
import json
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from sqlalchemy import Engine

from monitor.errors import ExitCode
from monitor.store.checks import load_checks
from monitor.store.models import get_model
from monitor.store.observations import load_observations
from monitor.store.versions import list_versions
from tests.support.snapshots import WorldCache
from tests.support.world import (
    BAD_ROW,
    CHANGED,
    FIT_CANDIDATE,
    LAST_DAY,
    MODEL,
    NEW_DAY,
    PROMOTE_AND_ADD_A_DAY,
    REACH_REFIT,
    WIDE_PALLETS,
    World,
    loads_between,
    new_day_text,
    settings_for,
)


@pytest.fixture
def world(worlds: WorldCache, engine: Engine, make_settings, tmp_path: Path) -> World:
    return worlds.world(engine, settings_for(make_settings, engine), tmp_path, CHANGED, 71,
                        (REACH_REFIT, FIT_CANDIDATE, PROMOTE_AND_ADD_A_DAY))


def _version_and_window(world: World, number: int) -> tuple[float, pd.DataFrame]:
    """A stored version's level and the rows of its fit window (what statsmodels refits)."""
    with world.engine.connect() as conn:
        model = get_model(conn, MODEL)
        (version,) = [v for v in list_versions(conn, model.id) if v.number == number]
        rows = load_observations(conn, model, version.fit_start, version.fit_end)
    return version.level, pd.DataFrame({"pallets": rows.x[:, 0], "load_minutes": rows.y})


def _statsmodels_scores(window: pd.DataFrame, day: pd.DataFrame, level: float) -> pd.DataFrame:
    """Reference: statsmodels OLS(...).fit().get_prediction(...).summary_frame(alpha), the
    obs_ci_* bounds; the standardized residual divides by the prediction's own standard error,
    sqrt(mean_se² + scale) (docs/references.md, prediction intervals)."""
    fit = sm.OLS(window["load_minutes"], sm.add_constant(window[["pallets"]])).fit()
    exog = sm.add_constant(day[["pallets"]].astype(float), has_constant="add")
    frame = fit.get_prediction(exog).summary_frame(alpha=1 - level)
    se = np.sqrt(frame["mean_se"] ** 2 + fit.scale)
    frame["z"] = (day["load_minutes"].to_numpy() - frame["mean"]) / se
    frame["outside"] = ((day["load_minutes"].to_numpy() < frame["obs_ci_lower"])
                        | (day["load_minutes"].to_numpy() > frame["obs_ci_upper"]))
    frame["beyond"] = ((day["pallets"] < window["pallets"].min())
                       | (day["pallets"] > window["pallets"].max())).to_numpy()
    return frame.reset_index(drop=True)


def _rows_csv(cli, *argv: str) -> pd.DataFrame:
    code, out, err = cli("rows", MODEL, *argv, "--csv")
    assert code == 0, err
    return pd.read_csv(io.StringIO(out))


def _assert_matches(rows: pd.DataFrame, ref: pd.DataFrame) -> None:
    # the version is fitted from merged day statistics, statsmodels by QR on the raw rows
    np.testing.assert_allclose(rows["planned"], ref["mean"], rtol=1e-10)
    np.testing.assert_allclose(rows["lower"], ref["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(rows["upper"], ref["obs_ci_upper"], rtol=1e-10)
    np.testing.assert_allclose(rows["std_residual"], ref["z"], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(rows["residual"], rows["load_minutes"] - ref["mean"],
                               rtol=1e-9, atol=1e-9)
    assert rows["missed"].tolist() == ref["outside"].tolist()
    assert rows["extrapolated"].tolist() == ref["beyond"].tolist()


def test_a_checked_day_is_scored_by_the_version_that_checked_it(cli, world: World) -> None:
    day = "2026-04-10"
    code, out, err = cli("rows", MODEL, "--day", day, "--json")
    assert code == 0, err
    doc = json.loads(out)
    # version 2 is active now, but version 1 checked 10 April: its intervals are the ones
    assert (doc["version"], doc["scored_by"], doc["active_version"]) == (1, "check", 2)
    rows = _rows_csv(cli, "--day", day)
    level, window = _version_and_window(world, 1)
    _assert_matches(rows, _statsmodels_scores(window, rows, level))
    assert rows["missed"].sum() > 0  # after the change: the comparison above includes misses
    assert len(rows) == doc["n"] == doc["check"]["n"]
    # the active version would have said otherwise: the choice of version is visible
    _, newer = _version_and_window(world, 2)
    assert not np.allclose(rows["planned"], _statsmodels_scores(newer, rows, level)["mean"])
    code, text, _ = cli("rows", MODEL, "--day", day)
    assert "scored by version 1, the version that checked the day" in text
    assert "version 2 is active now" in text


def test_a_day_not_checked_is_scored_by_the_active_version(cli, world: World) -> None:
    rows = _rows_csv(cli, "--day", NEW_DAY.isoformat())
    level, window = _version_and_window(world, 2)
    _assert_matches(rows, _statsmodels_scores(window, rows, level))
    assert rows["extrapolated"].tolist().count(True) == 1
    wide = _rows_csv(cli, "--day", NEW_DAY.isoformat(), "--extrapolated")
    assert wide["load_id"].tolist() == ["L260413-899"]
    assert wide["pallets"].tolist() == [WIDE_PALLETS]
    code, text, _ = cli("rows", MODEL, "--day", NEW_DAY.isoformat())
    assert code == 0
    assert "scored by version 2, the active version: the day is not checked yet" in text
    doc = json.loads(cli("rows", MODEL, "--day", NEW_DAY.isoformat(), "--json")[1])
    assert (doc["version"], doc["scored_by"], doc["check"]) == (2, "active", None)


def test_missed_lists_exactly_the_rows_outside_as_the_check_counted(cli, world: World) -> None:
    with world.engine.connect() as conn:
        checks = {c.day: c for c in load_checks(conn, get_model(conn, MODEL).id,
                                                date(2026, 4, 6), LAST_DAY)}
    level, window = _version_and_window(world, 1)
    compared = 0
    for day, check in checks.items():
        if check.n == 0:
            continue
        every = _rows_csv(cli, "--day", day.isoformat())
        outside = set(every.loc[_statsmodels_scores(window, every, level)["outside"],
                                "load_id"])
        missed = _rows_csv(cli, "--day", day.isoformat(), "--missed")
        assert set(missed["load_id"]) == outside, day
        assert len(missed) == check.n - check.covered, day  # the stored check's misses
        assert missed["missed"].all() and len(every) == check.n
        compared += 1
    assert compared >= 5


def test_rows_that_arrive_after_the_check_are_said_so(cli, world: World) -> None:
    late = loads_between(CHANGED, date(2026, 4, 10), date(2026, 4, 10), 555).head(2)
    late["load_id"] = ["L260410-801", "L260410-802"]
    path = world.tmp / "late.csv"
    late.to_csv(path, index=False)
    world.ingest(path, NEW_DAY)
    doc = json.loads(cli("rows", MODEL, "--day", "2026-04-10", "--json")[1])
    assert doc["check"]["rows_since_check"] and doc["n"] == doc["check"]["n"] + 2
    assert doc["version"] == 1  # still the version that scores the day when it is rechecked
    text = cli("rows", MODEL, "--day", "2026-04-10")[1]
    assert "rows arrived after that check" in text


def test_rejected_rows_keep_line_raw_text_and_reason(cli, world: World) -> None:
    code, out, err = cli("rows", MODEL, "--rejected", "--json")
    assert code == 0, err
    batches = json.loads(out)["batches"]
    (batch,) = [b for b in batches if b["source"].endswith("loads_2026-04-13.csv")]
    assert (batch["rejected"], batch["first_day"]) == (1, NEW_DAY.isoformat())
    lines = new_day_text().splitlines()
    want = {"batch": batch["batch"], "source": batch["source"], "line": len(lines),
            "reason": "not_a_number", "raw": BAD_ROW}
    assert lines[-1] == BAD_ROW
    doc = json.loads(cli("rows", MODEL, "--rejected", "--batch", str(batch["batch"]),
                         "--json")[1])
    (record,) = doc["records"]
    assert {k: record[k] for k in want} == want and "load_minutes" in record["detail"]
    # the same rows by the day the file was ingested (03:00 UTC on 14 April: 05:00 in Berlin)
    code, out, _ = cli("rows", MODEL, "--rejected", "--day", "2026-04-14", "--csv")
    assert code == 0
    (row,) = list(csv.DictReader(io.StringIO(out)))
    assert list(row) == ["batch", "source", "line", "reason", "detail", "raw"]
    assert row["raw"] == BAD_ROW and int(row["line"]) == len(lines)  # commas survive quoting
    text = cli("rows", MODEL, "--rejected", "--batch", str(batch["batch"]))[1]
    assert f"line {len(lines)}: not a number:" in text and BAD_ROW in text
    # the day's rows point at the batch that rejected a row
    text = cli("rows", MODEL, "--day", NEW_DAY.isoformat())[1]
    assert f"--rejected --batch {batch['batch']}" in text
    assert "no file or query was ingested" in cli("rows", MODEL, "--rejected", "--day",
                                                  "2026-04-15")[1]


def test_a_file_rejected_whole_says_how_many_good_rows_went_with_it(cli, world: World) -> None:
    good = loads_between(CHANGED, date(2026, 4, 14), date(2026, 4, 14), 914).head(2)
    path = world.tmp / "strict.csv"
    path.write_text(good.to_csv(index=False) + BAD_ROW.replace("L260413", "L260414") + "\n")
    code, _, err = cli("ingest", MODEL, str(path), "--strict")
    assert code == 1 and "was rejected whole" in err  # nothing stored: a file to look at
    listed = json.loads(cli("rows", MODEL, "--rejected", "--json")[1])["batches"]
    batch = listed[-1]
    assert (batch["status"], batch["read"], batch["rejected"]) == ("rejected", 3, 3)
    assert "3 (whole file)" in cli("rows", MODEL, "--rejected")[1]
    text = cli("rows", MODEL, "--rejected", "--batch", str(batch["batch"]))[1]
    assert "2 good row(s) went with the whole file (--strict)" in text
    assert "line 4: not a number:" in text


def test_csv_and_json_carry_the_same_rows(cli, world: World) -> None:
    code, out, _ = cli("rows", MODEL, "--day", "2026-04-10", "--missed", "--csv")
    assert code == 0
    header = out.splitlines()[0].split(",")
    assert header == ["docked_at", "load_id", "pallets", "load_minutes", "planned", "lower",
                      "upper", "residual", "std_residual", "missed", "extrapolated", "batch"]
    doc = json.loads(cli("rows", MODEL, "--day", "2026-04-10", "--missed", "--json")[1])
    assert doc["columns"] == header and doc["filters"] == ["missed"]
    from_csv = list(csv.DictReader(io.StringIO(out)))
    assert len(from_csv) == len(doc["records"]) == doc["shown"] == doc["missed"]
    for row, record in zip(from_csv, doc["records"], strict=True):
        assert row["load_id"] == record["load_id"]
        assert float(row["upper"]) == record["upper"]  # floats written exactly
        assert row["docked_at"] == record["docked_at"]
        assert record["docked_at"].startswith("2026-04-10T")
        assert record["docked_at"].endswith("+02:00")  # local time in Europe/Berlin (CEST)


@pytest.mark.parametrize(("argv", "says"), [
    (("rows", "no_such_model", "--day", "2026-04-10"), "no model named 'no_such_model'"),
    (("rows", MODEL, "--day", "2026-04-05"), "no rows stored for 2026-04-05; the nearest days "
                                             "with rows: 2026-04-04 (before) and 2026-04-06"),
    (("rows", MODEL, "--day", "2026-04-31"), "'2026-04-31' is not a date"),
    (("rows", MODEL, "--day", "10.04.2026"), "is not a date (YYYY-MM-DD)"),
    (("rows", MODEL), "give the day"),
    (("rows", MODEL, "--batch", "1"), "--batch goes with --rejected"),
    (("rows", MODEL, "--rejected", "--missed"), "filter a day's rows"),
    (("rows", MODEL, "--rejected", "--batch", "1", "--day", "2026-04-10"), "not both"),
    (("rows", MODEL, "--rejected", "--batch", "999"), "has no batch 999"),
    (("rows", MODEL, "--day", "2026-04-10", "--csv", "--json"), "not allowed with"),
])
def test_clear_errors_with_exit_code_1(cli, world: World, argv, says) -> None:
    code, out, err = cli(*argv)
    assert code == ExitCode.INPUT == 1
    assert says in err and "Traceback" not in err and out == ""
