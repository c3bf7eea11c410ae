"""``report --all``: the team page lists every model with its status, since when, why, a small
chart and a link to its page; the nightly run refreshes it when ``[report] dir`` is set.

Pages are read back with the standard library's ``html.parser``; PNG sizes per the PNG
specification (``tests/support/png.py``). The real-browser check is ``test_browser.py``.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import timedelta
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from sqlalchemy import Engine

from monitor.config import Settings
from monitor.interface.cli import main
from monitor.lifecycle.fit import FitRequest, fit_model
from monitor.report.charts import GLANCE_SIZE
from monitor.report.files import render
from monitor.report.series import limit_share_series
from monitor.report.team import TeamRow, write_team_report
from monitor.runtime.nightly import PARTIAL, run_night
from monitor.store import audit
from monitor.store.checks import last_check, load_checks
from monitor.store.models import get_model
from tests.report.conftest import (
    HOSTILE_COLUMN,
    HOSTILE_REASON,
    IDLE,
    LONGLEY,
    LONGLEY_FIT_END,
    LONGLEY_LAST,
    TEAM_LAST,
    Team,
    longley_frame,
)
from tests.support.page import Page
from tests.support.png import png_size
from tests.support.world import MODEL, World, night_after


class Rows(HTMLParser):
    """The team table: per row, its cells' text, links and image sources."""

    def __init__(self, text: str):
        super().__init__(convert_charrefs=True)
        self.rows: list[dict[str, list[str]]] = []
        self.feed(text)
        self.close()

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        values = dict(attrs)
        if tag == "tr":
            self.rows.append({"cells": [], "links": [], "images": []})
        elif self.rows and tag == "td":
            self.rows[-1]["cells"].append("")
        elif self.rows and tag == "a":
            self.rows[-1]["links"].append(values.get("href") or "")
        elif self.rows and tag == "img":
            self.rows[-1]["images"].append(values.get("src") or "")

    def handle_data(self, data: str) -> None:
        if self.rows and self.rows[-1]["cells"]:
            self.rows[-1]["cells"][-1] += data

    def table(self) -> list[dict[str, list[str]]]:
        return [r for r in self.rows if r["cells"]]  # the header row has th cells only


def _write(team: Team, out: Path):
    return write_team_report(team.settings, out, engine=team.engine,
                             now=night_after(TEAM_LAST))


def test_the_team_page_lists_every_model_and_links_its_page(team: Team, tmp_path: Path) -> None:
    report = _write(team, tmp_path / "team")
    assert report.path == tmp_path / "team" / "index.html" and report.problems == ()
    rows = Rows(report.path.read_text(encoding="utf-8")).table()
    # checked models first (by status, then name), a model never checked last
    assert [" ".join(r["cells"][0].split()) for r in rows] == [MODEL, LONGLEY, IDLE]
    with team.engine.connect() as conn:
        for row in rows:
            name = row["cells"][0].strip()
            model = get_model(conn, name)
            last = last_check(conn, model.id)
            cells = [" ".join(c.split()) for c in row["cells"]]
            if last is None:
                assert cells[1:5] == ["not checked", "", "", "not checked yet"]
            else:
                assert cells[1:5] == [last.status, str(last.status_since), str(last.day),
                                      last.reasons[0]]
            assert row["links"] == [f"models/{name}/index.html"]
            page = report.path.parent / row["links"][0]
            assert f"<h1>{name}</h1>" in page.read_text(encoding="utf-8")
            assert 'href="../../index.html"' in page.read_text(encoding="utf-8")
            (image,) = row["images"]
            assert image == f"models/{name}/glance.png"
            assert png_size((report.path.parent / image).read_bytes()) == GLANCE_SIZE
    assert [r.model for r in report.rows] == [MODEL, LONGLEY, IDLE]
    assert "team page of 3 model(s)" in report.sentence()
    assert report.as_dict()["models"][0]["model"] == MODEL


def test_text_is_escaped_on_every_page(team: Team, tmp_path: Path) -> None:
    report = _write(team, tmp_path / "team")
    pages = [report.path, *sorted((report.path.parent / "models").glob("*/index.html"))]
    assert len(pages) == 4
    for path in pages:
        page = Page(path.read_text(encoding="utf-8"))
        assert "script" not in page.tags and "b" not in page.tags, path
    longley = Page((report.path.parent / "models" / LONGLEY / "index.html").read_text())
    assert f"TOTEMP ~ GNP + {HOSTILE_COLUMN}" in longley.words  # a column name, as typed
    dock = Page((report.path.parent / "models" / MODEL / "index.html").read_text())
    assert f"refit advice standing since 2026-03-16 (“{HOSTILE_REASON}”)" in dock.words


def test_a_model_name_that_is_markup_shows_literally() -> None:
    # Model names are letters, digits, '_', '-' and '.', so no stored model is named like
    # this; the template escapes whatever it is given all the same.
    hostile = TeamRow("<b>x</b>", "refit", None, None, "<script>alert(1)</script>",
                      "models/<b>x</b>/index.html", "models/<b>x</b>/glance.png", "<i>y</i>")
    html = render("team.html.j2", {"rows": [hostile], "models": "models", "written_at": "now",
                                   "days": 90})
    page = Page(html)
    assert not {"b", "i", "script"} & set(page.tags)
    assert "<b>x</b>" in page.words and "<script>alert(1)</script>" in page.words
    assert 'href="models/%3Cb%3Ex%3C/b%3E/index.html"' in html


def test_a_page_that_cannot_be_written_is_listed_with_the_reason(team: Team,
                                                               tmp_path: Path) -> None:
    out = tmp_path / "team"
    (out / "models").mkdir(parents=True)
    (out / "models" / LONGLEY).write_text("in the way")
    report = _write(team, out)
    assert report.problems == (f"{LONGLEY}: {out / 'models' / LONGLEY} is a file; the report "
                               "needs a folder to write index.html and its charts into",)
    rows = {r["cells"][0].strip(): r for r in Rows(report.path.read_text()).table()}
    assert rows[LONGLEY]["links"] == [] and rows[LONGLEY]["images"] == []
    assert "its page could not be written" in " ".join(rows[LONGLEY]["cells"])
    assert rows[MODEL]["links"] == [f"models/{MODEL}/index.html"]  # the others are written


def test_report_all_on_the_command_line(team: Team, tmp_path: Path, capsys) -> None:
    config = tmp_path / "fitwatch.toml"
    config.write_text(f'[database]\nurl = "{team.engine.url}"\n'
                      '[schedule]\ntimezone = "Europe/Berlin"\n')
    assert main(["--config", str(config), "report", "--all", "--out", str(tmp_path / "t")]) == 0
    assert "team page of 3 model(s) written to" in capsys.readouterr().out
    assert (tmp_path / "t" / "models" / IDLE / "index.html").is_file()
    for argv in (["report", "--out", "x"], ["report", LONGLEY, "--all", "--out", "x"]):
        assert main(["--config", str(config), *argv]) == 1
        assert "give either a model's NAME or --all" in capsys.readouterr().err
    (tmp_path / "u" / "models").mkdir(parents=True)
    (tmp_path / "u" / "models" / IDLE).write_text("in the way")
    assert main(["--config", str(config), "report", "--all", "--out", str(tmp_path / "u")]) == 1
    assert f"not written: {IDLE}: " in capsys.readouterr().out


def test_the_small_chart_shows_each_chart_against_its_limit(changed: World) -> None:
    with changed.engine.connect() as conn:
        checks = load_checks(conn, get_model(conn, MODEL).id)
    series = limit_share_series(checks, 0.75)
    assert series.days == tuple(c.day for c in checks)  # every calendar day is checked here
    for i, check in enumerate(checks):
        assert series.bias[i] == max(check.cusum_upper, check.cusum_lower) / check.cusum_h
        chart = check.details.slope_chart
        if chart is None:
            assert np.isnan(series.slope[i])
        else:
            assert series.slope[i] == chart.value / chart.h
    # the refit this world reaches shows as a chart past its limit
    assert checks[-1].status == "refit" and max(series.bias[-1], series.slope[-1]) > 1


# the nightly run --------------------------------------------------------------------------------
@pytest.fixture
def longley_only(engine: Engine, make_settings: Callable[..., Settings],
                 tmp_path: Path) -> Callable[..., Settings]:
    """A database with the Longley model fitted through 5 January 2020; returns a function
    giving settings with ``[report]`` as asked."""
    path = tmp_path / "longley.csv"
    longley_frame().to_csv(path, index=False, float_format="%.17g")
    url = engine.url.render_as_string(hide_password=False)

    def settings(**report: object) -> Settings:
        return make_settings(url, report=report)

    fit_model(settings(), FitRequest(LONGLEY, path, "TOTEMP", ("GNP", "POP"), "at",
                                     end=LONGLEY_FIT_END),
              now=night_after(LONGLEY_FIT_END), engine=engine, actor="test")
    return settings


def test_the_nightly_run_refreshes_the_team_page(engine: Engine, longley_only,
                                                 tmp_path: Path) -> None:
    settings = longley_only(dir=str(tmp_path / "team"), days=30)
    run = run_night(settings, engine, now=night_after(LONGLEY_LAST))
    assert run.status == "ok" and len(run.checks.checks) == 3
    rows = Rows((tmp_path / "team" / "index.html").read_text()).table()
    assert [[" ".join(c.split()) for c in r["cells"][:4]] for r in rows] == [
        [LONGLEY, "ok", "2020-01-06", str(LONGLEY_LAST)]]
    page = (tmp_path / "team" / "models" / LONGLEY / "index.html").read_text()
    assert "Period shown: 2019-12-10 to 2020-01-08" in page  # [report] days = 30


def test_a_team_page_that_cannot_be_written_never_fails_the_checks(engine: Engine, longley_only,
                                                                  tmp_path: Path) -> None:
    blocked = tmp_path / "team"
    blocked.write_text("a file where the folder should be")
    settings = longley_only(dir=str(blocked))
    run = run_night(settings, engine, now=night_after(LONGLEY_LAST))
    assert len(run.checks.checks) == 3 and not run.failures  # checked all the same
    assert run.status == PARTIAL and run.exit_code() == 1
    assert run.problems == (f"report: {blocked} is a file; the report needs a folder to write "
                            "index.html and its charts into",)
    with engine.connect() as conn:
        model = get_model(conn, LONGLEY)
        assert last_check(conn, model.id).day == LONGLEY_LAST
        failures = [e for e in audit.log_lines(conn) if e.action == "failure"]
    assert [f.details["stage"] for f in failures] == ["report"]


def test_no_team_page_without_the_setting(engine: Engine, longley_only, tmp_path: Path,
                                          monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    run = run_night(longley_only(), engine, now=night_after(LONGLEY_LAST + timedelta(days=1)))
    assert run.status == "ok" and not any(tmp_path.rglob("*.html"))


def test_a_team_page_of_no_model_says_how_to_start(engine: Engine, make_settings,
                                                   tmp_path: Path) -> None:
    settings = make_settings(engine.url.render_as_string(hide_password=False))
    report = write_team_report(settings, tmp_path / "team", engine=engine)
    assert report.rows == () and report.problems == ()
    page = Page(report.path.read_text(encoding="utf-8"))
    assert "No model is defined yet" in page.words and page.images == []
