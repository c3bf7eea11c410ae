"""model fit / model import / model show / model list through the command line."""

from __future__ import annotations

import json
import logging
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from sqlalchemy import Engine

from monitor.domain.phrasing import fmt
from monitor.lifecycle.importer import NO_SLOPE_TEST, OPTIONAL, REQUIRED
from monitor.store.access import database
from monitor.store.models import get_model
from monitor.store.versions import active_version

ROOT = Path(__file__).resolve().parents[1]
HISTORY = ROOT / "demo_data" / "history.csv"
FIT = ["model", "fit", "dock_loading", "--y", "load_minutes", "--x", "pallets",
       "--time", "docked_at", "--id", "load_id"]


def test_fit_creates_the_model_and_agrees_with_statsmodels(cli) -> None:
    code, out, err = cli(*FIT, "--data", str(HISTORY), "--json")
    assert code == 0, err
    doc = json.loads(out)
    frame = pd.read_csv(HISTORY)
    ref = sm.OLS(frame["load_minutes"], sm.add_constant(frame["pallets"])).fit()
    # statsmodels as the reference library for the stored fit
    assert doc["coefficients"]["intercept"] == pytest.approx(ref.params["const"], rel=1e-10)
    assert doc["coefficients"]["pallets"] == pytest.approx(ref.params["pallets"], rel=1e-10)
    assert doc["std_errors"]["pallets"] == pytest.approx(ref.bse["pallets"], rel=1e-10)
    assert doc["s"] == pytest.approx(np.sqrt(ref.scale), rel=1e-10)
    assert doc["r_squared"] == pytest.approx(ref.rsquared, rel=1e-12)
    assert (doc["n"], doc["dof"], doc["version"], doc["state"]) == (len(frame), len(frame) - 2,
                                                                    1, "active")
    assert doc["ingest"]["accepted"] == len(frame)
    assert doc["active_from"] == "2026-03-08"  # the day after the last day with rows
    # at least 40 days with rows: a fixed reference, whose estimation error raises the limit
    # (a shorter window would be self-starting, README)
    days = pd.to_datetime(frame["docked_at"]).dt.date.nunique()
    assert days >= 40 and doc["cusum"]["learn_until_days"] == 0
    assert doc["cusum"]["h"] > doc["cusum"]["h_known"]


def test_model_show_words_the_fit_as_the_page_does(cli) -> None:
    # one wording for the fit summary, here and on the model's page (tests/report/test_page.py),
    # in the model's own nouns and unit
    with cli.config.open("a") as fh:
        fh.write('[models.dock_loading.words]\nrow = "load"\nrows = "loads"\ny_unit = "min"\n')
    assert cli(*FIT, "--data", str(HISTORY))[0] == 0
    code, text, _ = cli("model", "show", "dock_loading")
    doc = json.loads(cli("model", "show", "dock_loading", "--json")[1])
    assert code == 0
    assert (f"  typical scatter around the line {fmt(doc['s'], 4)} min from {doc['n']:,} loads, "
            f"explains {100 * doc['r_squared']:.1f} % of the variation\n") in text
    assert "degrees of freedom" not in text


def test_a_second_fit_is_a_candidate_and_windows_select_rows(cli) -> None:
    assert cli(*FIT, "--data", str(HISTORY))[0] == 0
    code, out, _ = cli("model", "fit", "dock_loading", "--start", "2026-02-01", "--json")
    doc = json.loads(out)
    assert code == 0 and doc["version"] == 2 and doc["state"] == "candidate"
    assert doc["fit_window"][0] >= "2026-02-01" and doc["active_from"] is None
    code, out, _ = cli("model", "show", "dock_loading", "--json")
    assert json.loads(out)["version"] == 1  # the active one
    code, out, _ = cli("model", "list")
    assert "dock_loading: load_minutes ~ pallets; v1 of 2; not checked yet" in out


@pytest.mark.parametrize(("extra", "words"), [
    (["model", "fit", "new_model", "--data", str(HISTORY)], "give --y, --x, --time"),
    (["model", "fit", "dock_loading", "--y", "other"], "already exists with --y"),
    (["model", "fit", "dock_loading", "--start", "2026-03-01", "--end", "2026-02-01"],
     "lies after --end"),
    (["model", "fit", "dock_loading", "--start", "2026-03-06"], "at least 5 are needed"),
    (["model", "show", "dock_loading", "--version", "7"], "has no version 7"),
    (["model", "show", "nope"], "no model"),
])
def test_fit_and_show_errors_say_what_to_fix(cli, extra: list[str], words: str) -> None:
    assert cli(*FIT, "--data", str(HISTORY))[0] == 0
    code, _, err = cli(*extra)
    assert code == 1 and words in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_constant_predictor_is_named(cli, tmp_path: Path) -> None:
    frame = pd.read_csv(HISTORY)
    frame["pallets"] = 33
    path = tmp_path / "full_trailers.csv"
    frame.to_csv(path, index=False)
    code, _, err = cli(*FIT, "--data", str(path))
    assert code == 1 and "'pallets' is constant" in err


def _import_file(tmp_path: Path, **override) -> Path:
    """A model fitted by statsmodels on the demo history, described for 'model import'."""
    frame = pd.read_csv(HISTORY)
    ref = sm.OLS(frame["load_minutes"], sm.add_constant(frame["pallets"])).fit()
    cov = ref.cov_params().to_numpy()
    doc = {"response": "load_minutes", "predictors": ["pallets"], "time_column": "docked_at",
           "id_column": "load_id", "s": float(np.sqrt(ref.scale)), "dof": int(ref.df_resid),
           "coefficients": {"intercept": float(ref.params["const"]),
                            "pallets": float(ref.params["pallets"])},
           "covariance": cov.tolist(), "fit_end": "2026-03-08",
           "ranges": {"pallets": [4.0, 33.0]}}
    doc.update(override)
    path = tmp_path / "fitted_elsewhere.json"
    path.write_text(json.dumps(doc))
    return path


def test_imported_model_scores_like_statsmodels(cli, tmp_path: Path) -> None:
    code, out, err = cli("model", "import", "dock_loading", str(_import_file(tmp_path)),
                         "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["source"] == "import" and doc["active_from"] == "2026-03-09"
    assert doc["warnings"] == ["no day-effect variances (tau2, sigma_w2): days are assumed "
                               "independent", NO_SLOPE_TEST.format(name="dock_loading")]
    frame = pd.read_csv(HISTORY)
    ref = sm.OLS(frame["load_minutes"], sm.add_constant(frame["pallets"])).fit()
    x0 = np.array([4.0, 20.0, 33.0])
    expected = ref.get_prediction(sm.add_constant(x0, has_constant="add")).summary_frame(0.05)
    with database(_settings(cli.config)) as engine, engine.connect() as conn:
        model = active_version(conn, get_model(conn, "dock_loading").id).prediction_model()
    lower, upper = model.interval(x0, 0.95)
    # statsmodels obs_ci as the reference: the imported covariance gives the leverage term
    assert np.allclose(lower, expected["obs_ci_lower"], rtol=1e-9)
    assert np.allclose(upper, expected["obs_ci_upper"], rtol=1e-9)


def _settings(config: Path):
    from monitor.config import load_settings

    return load_settings(config)


@pytest.mark.parametrize(("override", "words"), [
    ({"colour": "red"}, "unknown key 'colour'"),
    ({"coefficients": {"intercept": 1.0}}, "exactly the keys intercept, pallets"),
    ({"covariance": [[1.0, 2.0], [3.0, 1.0]]}, "symmetric"),
    ({"s": -1.0}, "must be positive"),
    ({"dof": 2.5}, "'dof' must be an integer"),
])
def test_import_errors_name_the_problem(cli, tmp_path: Path, override, words: str) -> None:
    code, _, err = cli("model", "import", "dock_loading", str(_import_file(tmp_path, **override)))
    assert code == 1 and words in err, err


def test_import_says_what_it_did_and_each_note_once(cli, tmp_path: Path) -> None:
    # Issue 13: the import's answer misspelt what it did, and printed every note twice
    path = _import_file(tmp_path, covariance=None)
    code, out, err = cli("model", "import", "dock_loading", str(path))
    assert code == 0, err
    lines = out.splitlines()
    assert lines[0] == (f"dock_loading: version 1 imported from {path} (active: it scores days "
                        "from 2026-03-09)")
    assert lines[1] == "dock_loading version 1 (active, imported)"
    notes = [line for line in lines if "note:" in line]
    assert len(notes) == 3 and len(set(notes)) == 3
    code, out, _ = cli("model", "import", "dock_loading", str(path))
    assert code == 0 and out.splitlines()[0].endswith(
        "version 2 imported from " + str(path) + " (a candidate: 'fitwatch promote dock_loading "
        "2' makes it the active version)")


def test_import_text_and_json_agree_on_what_the_bias_chart_promises(cli, tmp_path: Path) -> None:
    # Issue 13: the text promised a limit "held with probability 0.95" while the JSON said
    # calibrated: false. An imported version has no fit-window days to allow for the
    # estimation error of its values, and both now say so in the same words.
    path = _import_file(tmp_path)
    code, out, _ = cli("model", "import", "dock_loading", str(path), "--json")
    cusum = json.loads(out)["cusum"]
    assert code == 0 and cusum["calibrated"] is False and cusum["guarantee"] is None
    assert cusum["promise"].startswith("but only if the imported coefficients and scatter are "
                                       "exact: the file carries no days of the fit window")
    code, text, _ = cli("model", "show", "dock_loading")
    assert code == 0 and cusum["promise"] in text
    assert "held with probability" not in text


def test_an_imported_version_says_why_it_has_no_slope_test(cli, tmp_path: Path) -> None:
    # Issue 13: an imported version never got a slope test and nothing said why
    assert cli("model", "import", "dock_loading", str(_import_file(tmp_path)))[0] == 0
    code, text, _ = cli("model", "show", "dock_loading")
    assert code == 0
    assert ("note: no slope test and no within-day slope chart: both compare recent days with "
            "the fit window's rows day by day") in text
    assert "'fitwatch refit dock_loading --start DAY'" in text


def _readme_section(title: str) -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    start = text.index(f"\n## {title}\n")
    end = text.find("\n## ", start + 1)
    return text[start:end if end > 0 else None]


def test_the_readme_documents_every_import_key_and_its_example_imports(cli,
                                                                        tmp_path: Path) -> None:
    # Issue 13: the format was documented nowhere; a user learnt the keys from an error
    section = _readme_section("The model import file")
    table_keys = {key for line in section.splitlines() if line.startswith("| `")
                  for key in re.findall(r"`(\w+)`", line.split("|")[1])}
    assert table_keys == set(REQUIRED) | set(OPTIONAL)
    example = re.search(r"```toml\n(.*?)```", section, re.S)
    assert example is not None
    path = tmp_path / "example.toml"
    path.write_text(example.group(1), encoding="utf-8")
    code, out, err = cli("model", "import", "dock_loading", str(path), "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["coefficients"] == {"intercept": 8.553, "pallets": 2.089}
    assert doc["fit_window"] == ["2026-01-05", "2026-03-07"]
    # and an error about a key points there
    code, _, err = cli("model", "import", "dock_loading", str(_import_file(tmp_path, colour=1)))
    assert code == 1 and "'The model import file'" in err


def test_a_failed_fit_leaves_no_model_behind(cli, engine: Engine) -> None:
    # Issue 13: a fit naming a column the file lacks used to create the model anyway, and every
    # retry then refused the corrected columns. Now the fit is all or nothing.
    bad = [*FIT[:-1], "nosuchcol"]
    code, _, err = cli(*bad, "--data", str(HISTORY))
    assert code != 0 and "nosuchcol" in err
    code, out, _ = cli("model", "list", "--json")
    assert code == 0 and json.loads(out) == []
    code, _, err = cli(*FIT, "--data", str(HISTORY))
    assert code == 0, err


def test_a_fit_on_a_file_whose_rows_were_all_rejected_says_why(cli, tmp_path: Path) -> None:
    # before: "has no stored observations to fit on; give --data FILE", the FILE just given
    semi = tmp_path / "history_de.csv"  # saved by a spreadsheet in a German locale
    frame = pd.read_csv(HISTORY)
    frame.to_csv(semi, sep=";", decimal=",", index=False)
    minutes = f"{frame['load_minutes'].iloc[0]:.1f}".replace(".", ",")
    code, out, err = cli(*FIT, "--data", str(semi))
    assert code == 1 and out == ""
    assert f"every row of {semi} was rejected, so nothing of it can be fitted on" in err
    assert f"{len(frame):,} not a number (lines 2, 3, 4" in err
    assert f"e.g. line 2: load_minutes is '{minutes}', not a number" in err
    assert "no stored observations" not in err
    assert json.loads(cli("model", "list", "--json")[1]) == []  # nothing left behind
    # a model that has rows is not refitted on them as if the file had been read
    assert cli(*FIT, "--data", str(HISTORY))[0] == 0
    code, _, err = cli(*FIT, "--data", str(semi))
    assert code == 1 and "was rejected, so nothing of it can be fitted on" in err
    (listed,) = json.loads(cli("model", "list", "--json")[1])
    assert listed["versions"] == 1  # no candidate fitted on the stored rows alone


def test_rename_and_delete_are_audited_and_delete_needs_yes(cli, engine: Engine) -> None:
    from monitor.store import audit
    from monitor.store.schema import audit_log

    assert cli(*FIT, "--data", str(HISTORY))[0] == 0
    code, out, _ = cli("model", "rename", "dock_loading", "dock_east")
    assert code == 0 and "'dock_loading' is now 'dock_east'" in out
    code, _, err = cli("model", "rename", "dock_east", "bad name!")
    assert code != 0 and "not allowed" in err
    code, _, err = cli("model", "delete", "dock_east")
    assert code != 0 and "--yes" in err
    code, out, _ = cli("model", "delete", "dock_east", "--yes")
    stored = len(pd.read_csv(HISTORY))
    assert stored > 999  # before: "deleted with its 3873 observation(s)", elsewhere "3,873"
    assert code == 0
    assert f"deleted with its {stored:,} observations, 1 version and 0 day checks" in out
    with database(_settings(cli.config), engine) as db, db.connect() as conn:
        rows = conn.execute(audit_log.select().order_by(audit_log.c.id)).all()
    actions = [r.action for r in rows]
    assert actions[-2:] == ["rename", "delete"] and "fit" in actions
    assert all(r.model_id is None for r in rows)  # kept, detached from the deleted model
    assert rows[-1].details["model"] == "dock_east" and rows[-1].details["observations"] > 0
    assert {"rename", "delete"} <= set(audit.ACTIONS)
    code, out, _ = cli("model", "list", "--json")
    assert json.loads(out) == []


def test_a_model_without_a_version_does_not_fail_the_others_night(cli, engine: Engine) -> None:
    from datetime import UTC, datetime

    from monitor.domain.model import ModelSpec
    from monitor.store.engine import write_transaction
    from monitor.store.models import create_model

    assert cli(*FIT, "--data", str(HISTORY))[0] == 0
    with database(_settings(cli.config), engine) as db, write_transaction(db) as conn:
        create_model(conn, ModelSpec("waiting", "minutes", ("pallets",), "at"),
                     datetime(2026, 3, 8, tzinfo=UTC))
    code, out, err = cli("check", "--through", "2026-03-10")
    assert code == 0, err
    assert "waiting: nothing new to check (no active version yet" in out


def _config_with(cli, extra: str) -> None:
    cli.config.write_text(cli.config.read_text() + extra)


def test_a_misspelt_model_section_or_column_is_named(cli, tmp_path: Path) -> None:
    # Issue 13: [models.repiar.ranges] and a range under a column the model lacks were accepted
    # and ignored (so rows the range should refuse were stored). Both now stop with the
    # section, the file and what does exist.
    assert cli(*FIT, "--data", str(HISTORY))[0] == 0
    _config_with(cli, '\n[models.dock_loadng.ranges]\npallets = [1, 40]\n')
    code, _, err = cli("check", "--through", "2026-03-10")
    assert code == 1
    assert "[models.dock_loadng] names no model in the database (models: dock_loading)" in err
    assert str(cli.config) in err
    cli.config.write_text(cli.config.read_text().replace("dock_loadng", "dock_loading")
                          .replace("pallets = [1, 40]", "palets = [1, 40]"))
    night = tmp_path / "night.csv"
    night.write_text("load_id,docked_at,pallets,load_minutes,door\n"
                     "N1,2026-03-09 06:00:00,-4,20.0,D01\n")
    code, _, err = cli("ingest", "dock_loading", str(night))
    assert code == 1
    assert "[models.dock_loading.ranges] names 'palets'" in err
    assert "its columns are pallets, load_minutes" in err
    code, _, err = cli("check", "--through", "2026-03-10")
    assert code == 1 and "'palets'" in err


def test_a_misspelt_model_section_stops_every_command_that_acts_and_is_shown_by_views(
        cli, tmp_path: Path, caplog: pytest.LogCaptureFixture) -> None:
    # Before, only `check` of all models and the daemon caught [models.dock_loadng]: `check
    # dock_loading`, `ingest dock_loading` and `status` exited 0 without a word. Commands that
    # store, check, mail or change versions now refuse; views say it on stderr and go on.
    assert cli(*FIT, "--data", str(HISTORY))[0] == 0
    _config_with(cli, '\n[models.dock_loadng.ranges]\npallets = [1, 40]\n')
    message = "[models.dock_loadng] names no model in the database (models: dock_loading)"
    night = tmp_path / "night.csv"
    night.write_text("load_id,docked_at,pallets,load_minutes,door\n"
                     "N1,2026-03-09 06:00:00,4,20.0,D01\n")
    for argv in (("check", "dock_loading", "--through", "2026-03-10"),
                 ("ingest", "dock_loading", str(night)),
                 ("ack", "dock_loading"),
                 ("refit", "dock_loading")):
        code, out, err = cli(*argv)
        assert code == 1 and out == "", argv
        assert message in err and str(cli.config) in err, argv
    for argv in (("status",), ("status", "--json"), ("model", "list"),
                 ("model", "show", "dock_loading"), ("audit",)):
        caplog.clear()
        with caplog.at_level(logging.WARNING, logger="monitor"):
            code, out, _ = cli(*argv)
        assert code == 0 and out, argv
        warned = [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING]
        assert len(warned) == 1 and message in warned[0] and str(cli.config) in warned[0], argv
    # a section written before its model is created is no typo for the fit that creates it
    _config_with(cli, '\n[models.dock_west.ranges]\npallets = [1, 40]\n')
    cli.config.write_text(cli.config.read_text().replace("dock_loadng", "dock_loading"))
    caplog.clear()
    with caplog.at_level(logging.WARNING, logger="monitor"):
        code, _, err = cli("model", "fit", "dock_west", "--y", "load_minutes", "--x", "pallets",
                           "--time", "docked_at", "--id", "load_id", "--data", str(HISTORY))
    assert code == 0, err
    assert not [r for r in caplog.records if r.levelno == logging.WARNING]
    assert cli("check", "dock_loading", "--through", "2026-03-10")[0] == 0
