"""``predict`` and ``model export`` against statsmodels on the Longley data (two predictors)."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm


def _longley(tmp_path: Path) -> tuple[pd.DataFrame, Path]:
    # Longley (1967), shipped with statsmodels: TOTEMP on GNP and POP, two years a "day" (the
    # monitor needs day stamps; the fit does not depend on them)
    data = sm.datasets.longley.load_pandas().data
    frame = data[["GNP", "POP", "TOTEMP"]].copy()
    frame.insert(0, "at", [f"2020-01-{i // 2 + 1:02d} 1{i % 2}:00" for i in range(len(frame))])
    path = tmp_path / "longley.csv"
    frame.to_csv(path, index=False, float_format="%.17g")
    return frame, path


def test_planned_rows_match_statsmodels_prediction_intervals(cli, tmp_path: Path) -> None:
    frame, path = _longley(tmp_path)
    code, _, err = cli("model", "fit", "longley", "--data", str(path), "--y", "TOTEMP",
                       "--x", "GNP", "--x", "POP", "--time", "at")
    assert code == 0, err
    # planned jobs: rows inside and outside the fitted range, and two that cannot be planned
    jobs = pd.DataFrame({"job": ["a", "b", "c", "d", "e"],
                         "GNP": ["300000", "520500.5", "", "700000", "abc"],
                         "POP": ["110000", "125000", "118000", "140000", "120000"]})
    jobs_path = tmp_path / "jobs.csv"
    jobs.to_csv(jobs_path, index=False)
    out = tmp_path / "plan.csv"
    code, text, err = cli("predict", "longley", str(jobs_path), "--out", str(out),
                          "--level", "0.9")
    assert code == 0, err
    assert "3 of 5 rows planned" in text and "GNP is missing" in text
    assert "GNP is 'abc', not a number" in text
    plan = pd.read_csv(out)
    # Reference: statsmodels OLS get_prediction(...).summary_frame(alpha=0.10), obs_ci_*
    ref = sm.OLS(frame["TOTEMP"], sm.add_constant(frame[["GNP", "POP"]])).fit()
    good = plan["reason"].isna().to_numpy()
    exog = sm.add_constant(plan.loc[good, ["GNP", "POP"]].astype(float), has_constant="add")
    want = ref.get_prediction(exog).summary_frame(alpha=0.10)
    np.testing.assert_allclose(plan.loc[good, "planned"], want["mean"], rtol=1e-10)
    np.testing.assert_allclose(plan.loc[good, "lower"], want["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(plan.loc[good, "upper"], want["obs_ci_upper"], rtol=1e-10)
    # GNP 700000 lies above the fitted maximum (554894)
    assert plan.loc[good, "extrapolated"].tolist() == [False, False, True]
    assert (plan["version"] == 1).all() and plan.loc[~good, "planned"].isna().all()


@pytest.mark.parametrize("suffix", [".toml", ".json"])
def test_export_import_round_trip_plans_the_same(cli, tmp_path: Path, suffix: str) -> None:
    _, path = _longley(tmp_path)
    assert cli("model", "fit", "longley", "--data", str(path), "--y", "TOTEMP", "--x", "GNP",
               "--x", "POP", "--time", "at")[0] == 0
    described = tmp_path / f"longley{suffix}"
    code, _, err = cli("model", "export", "longley", "--out", str(described))
    assert code == 0, err
    # written in the format 'model import' reads for that name (README, "The model import file")
    if suffix == ".toml":
        assert tomllib.loads(described.read_text())["predictors"] == ["GNP", "POP"]
    else:
        assert json.loads(described.read_text())["predictors"] == ["GNP", "POP"]
    code, _, err = cli("model", "import", "copy", str(described))
    assert code == 0, f"import of the export: {err}"
    plans = []
    for name in ("longley", "copy"):
        code, out, err = cli("predict", name, "--at", "GNP=444500.5", "--at", "POP=117200",
                             "--json")
        assert code == 0, err
        plans.append(json.loads(out)["rows"][0])
    # the floats are written in their shortest exact form, so the copy plans bit for bit alike
    for key in ("planned", "lower", "upper"):
        assert plans[1][key] == plans[0][key]


def test_export_refuses_a_format_it_does_not_write(cli, tmp_path: Path) -> None:
    _, path = _longley(tmp_path)
    assert cli("model", "fit", "longley", "--data", str(path), "--y", "TOTEMP", "--x", "GNP",
               "--x", "POP", "--time", "at")[0] == 0
    target = tmp_path / "longley.yaml"
    code, out, err = cli("model", "export", "longley", "--out", str(target))
    assert code != 0 and not target.exists()
    assert ".toml" in err and ".json" in err and len(err.strip().splitlines()) == 1
    code, out, err = cli("model", "export", "longley")  # no --out: JSON on stdout, as before
    assert code == 0 and json.loads(out)["response"] == "TOTEMP"


def test_planned_file_keeps_numbers_as_numbers(cli, tmp_path: Path) -> None:
    # a CSV is read as text; what goes back out is typed: a column whose every filled cell is a
    # finite number becomes numbers (whole numbers as integers), any other column keeps its text
    _, path = _longley(tmp_path)
    assert cli("model", "fit", "longley", "--data", str(path), "--y", "TOTEMP", "--x", "GNP",
               "--x", "POP", "--time", "at")[0] == 0
    jobs = tmp_path / "jobs.csv"
    jobs.write_text("job,crew,code,GNP,POP\n"
                    "J-1,3,007,444500.5,117200\n"
                    "J-2,,010,0.1,abc\n"
                    "J-3,12,011,,118000\n")
    out = tmp_path / "plan.parquet"
    code, _, err = cli("predict", "longley", str(jobs), "--out", str(out))
    assert code == 0, err
    plan = pd.read_parquet(out)
    assert plan["job"].tolist() == ["J-1", "J-2", "J-3"]  # text stays text
    assert plan["crew"].dtype == "Int64" and plan["crew"].tolist() == [3, pd.NA, 12]
    assert plan["code"].tolist() == ["007", "010", "011"]  # leading zeros: an identifier
    assert plan["GNP"].dtype == np.float64 and plan["GNP"].iloc[:2].tolist() == [444500.5, 0.1]
    assert np.isnan(plan["GNP"].iloc[2])  # empty: missing, and the row says so
    assert plan["POP"].tolist() == ["117200", "abc", "118000"]  # 'abc' cannot be a number
    assert plan["reason"].isna().tolist() == [True, False, False]
    assert plan["reason"].iloc[1:].tolist() == ["POP is 'abc', not a number", "GNP is missing"]
    code, text, err = cli("predict", "longley", str(jobs), "--json")
    assert code == 0, err
    rows = json.loads(text)["rows"]
    assert [r["crew"] for r in rows] == [3, None, 12]
    assert [r["GNP"] for r in rows] == [444500.5, 0.1, None]
    assert [r["POP"] for r in rows] == ["117200", "abc", "118000"]
    assert rows[0]["code"] == "007" and rows[0]["planned"] == plan["planned"].iloc[0]
    # one job from --at: its values are numbers too
    code, text, err = cli("predict", "longley", "--at", "GNP=444500.5", "--at", "POP=117200",
                          "--json")
    assert code == 0, err
    assert json.loads(text)["rows"][0]["GNP"] == 444500.5


def test_text_columns_become_numbers_only_when_every_cell_is_one() -> None:
    from monitor.lifecycle.planning import typed

    text = pd.DataFrame({"whole": ["+5", " 3 ", "-2"], "real": ["1e3", "2.50", ""],
                         "odd": ["1", "inf", "2"], "empty": ["", "", ""],
                         "huge": ["9007199254740993", "1", "2"], "zero": ["0", "0.5", "-0"]},
                        dtype=str)
    out = typed(text)
    assert out["whole"].dtype == "Int64" and out["whole"].tolist() == [5, 3, -2]
    assert out["real"].iloc[:2].tolist() == [1000.0, 2.5] and np.isnan(out["real"].iloc[2])
    assert out["odd"].tolist() == ["1", "inf", "2"]  # not finite: kept as text, a reason
    assert out["empty"].tolist() == ["", "", ""]
    assert out["huge"].tolist() == text["huge"].tolist()  # 2**53 + 1: a float loses the 1
    assert out["zero"].tolist() == [0.0, 0.5, 0.0]  # a lone 0 is no leading zero


def test_predict_says_what_is_wrong(cli, tmp_path: Path) -> None:
    _, path = _longley(tmp_path)
    assert cli("model", "fit", "longley", "--data", str(path), "--y", "TOTEMP", "--x", "GNP",
               "--x", "POP", "--time", "at")[0] == 0
    code, _, err = cli("predict", "longley", "--at", "GDP=1")
    assert code != 0 and "GDP" in err and "GNP, POP" in err
    code, _, err = cli("predict", "longley")
    assert code != 0 and "--at" in err
    wrong = tmp_path / "wrong.csv"
    wrong.write_text("GNP,population\n300,110\n")
    code, _, err = cli("predict", "longley", str(wrong))
    assert code != 0 and "no column 'POP'" in err and "population" in err
    code, out, _ = cli("predict", "longley", "--at", "GNP=300000")
    assert code == 0 and "not planned: POP is missing" in out


def test_one_row_a_day_is_a_clear_refusal(cli, tmp_path: Path) -> None:
    frame, _ = _longley(tmp_path)
    frame["at"] = [f"2020-01-{i + 1:02d} 10:00" for i in range(len(frame))]
    path = tmp_path / "daily.csv"
    frame.to_csv(path, index=False)
    code, _, err = cli("model", "fit", "longley", "--data", str(path), "--y", "TOTEMP",
                       "--x", "GNP", "--x", "POP", "--time", "at")
    assert code == 1 and "one observation per day" in err and "Traceback" not in err
