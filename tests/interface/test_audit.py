"""``fitwatch audit``: the audit log read back in plain lines and JSON, through renames and a
deletion. Before it existed the log could only be read in the database."""

from __future__ import annotations

import json
from pathlib import Path

import statsmodels.api as sm


def _longley(tmp_path: Path) -> Path:
    # Longley (1967), shipped with statsmodels; two years a "day" so the monitor has day stamps
    frame = sm.datasets.longley.load_pandas().data[["GNP", "POP", "TOTEMP"]].copy()
    frame.insert(0, "at", [f"2020-01-{i // 2 + 1:02d} 1{i % 2}:00" for i in range(len(frame))])
    path = tmp_path / "longley.csv"
    frame.to_csv(path, index=False, float_format="%.17g")
    return path


def test_the_audit_log_tells_a_models_history_through_rename_and_deletion(
        cli, tmp_path: Path) -> None:
    path = _longley(tmp_path)
    steps = [("model", "fit", "longley", "--data", str(path), "--y", "TOTEMP", "--x", "GNP",
              "--x", "POP", "--time", "at"),
             ("model", "fit", "longley", "--start", "2020-01-03"),
             ("promote", "longley", "2", "--reason", "shorter window"),
             ("rollback", "longley", "--reason", "back to the long one"),
             ("model", "rename", "longley", "employment"),
             ("model", "fit", "other", "--data", str(path), "--y", "TOTEMP", "--x", "GNP",
              "--time", "at")]
    for argv in steps:
        assert cli(*argv)[0] == 0, argv
    code, text, _ = cli("audit", "employment")
    assert code == 0
    lines = text.splitlines()
    assert len(lines) == 5 and all(" employment " in line for line in lines)
    assert "fitted version 1 on 2020-01-01 to 2020-01-08 (active)" in lines[0]
    assert "fitted version 2 on 2020-01-03 to 2020-01-08 (candidate)" in lines[1]
    assert lines[2].endswith("promoted version 2 in place of version 1 from 2020-01-09 "
                             "(\"shorter window\")")
    assert "rolled back to version 1 (active again as version 3)" in lines[3]
    assert "renamed from 'longley' to 'employment'" in lines[4]
    # the old name finds the same history; the other model's fit is not in it
    assert cli("audit", "longley")[1] == text
    assert len(cli("audit")[1].splitlines()) == 6
    # deleted: the history stays, with the model's name and version numbers
    assert cli("model", "delete", "employment", "--yes")[0] == 0
    code, out, _ = cli("audit", "employment", "--json")
    entries = json.loads(out)
    assert code == 0 and [e["action"] for e in entries] == ["fit", "fit", "promote", "rollback",
                                                             "rename", "delete"]
    assert {e["model"] for e in entries} == {"employment"}
    assert [e["version"] for e in entries[:4]] == [1, 2, 2, 3]
    assert entries[-1]["what"] == "deleted with its 16 observations, 3 versions and 0 day checks"
    assert cli("audit", "longley", "--last", "1")[1].splitlines()[0].endswith(
        "deleted with its 16 observations, 3 versions and 0 day checks")


def test_audit_errors_are_one_line(cli) -> None:
    code, _, err = cli("audit", "nosuch")
    assert code == 1 and err.startswith("fitwatch: ") and "nosuch" in err
    code, _, err = cli("audit", "--last", "0")
    assert code == 1 and "--last" in err
    code, out, _ = cli("audit")
    assert code == 0 and out.strip() == "nothing recorded"
