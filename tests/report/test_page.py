"""The report folder end to end: written from the real pipeline, parsed back, byte-stable.

HTML is read back with the standard library's ``html.parser`` (the reference parser here);
PNG files are checked against the PNG specification's signature and IHDR layout (W3C PNG /
RFC 2083) and decoded with Pillow.
"""

from __future__ import annotations

import io
from dataclasses import replace
from datetime import date
from pathlib import Path

import pytest
from PIL import Image

from monitor.errors import InputError, NotFoundError
from monitor.report.charts import REPORT_SIZE, SCATTER_SIZE
from monitor.report.page import load_report_data, render_page, write_report
from monitor.store.models import get_model
from monitor.store.observations import load_observations
from tests.support.page import Page
from tests.support.png import png_size
from tests.support.world import LAST_DAY, MODEL, World, night_after


def _report(world: World, folder: Path, **kwargs):
    return write_report(world.settings, MODEL, folder, engine=world.engine,
                        now=night_after(LAST_DAY), **kwargs)


def test_report_folder_with_candidate(changed: World, tmp_path: Path) -> None:
    result = _report(changed, tmp_path / "report")
    assert result.path == tmp_path / "report" / "index.html"
    assert (result.model, result.version, result.candidate, result.status) == (
        MODEL, 1, 2, "refit")
    assert result.last_day == LAST_DAY and result.as_dict()["last_day"] == "2026-04-12"
    assert "candidate 2" in result.sentence()
    page = Page(result.path.read_text(encoding="utf-8"))
    assert page.images and sorted(page.images) == sorted(p.name for p in result.charts)
    for src in page.images:
        assert "/" not in src and ":" not in src  # relative, inside the folder
        data = (result.path.parent / src).read_bytes()
        expected = SCATTER_SIZE if src == "scatter.png" else REPORT_SIZE
        assert png_size(data) == expected
        with Image.open(io.BytesIO(data)) as image:
            assert image.size == expected
    # self-contained: no scripts, no linked style sheets, no remote addresses
    assert "script" not in page.tags and "link" not in page.tags
    assert "http://" not in result.path.read_text() and "https://" not in result.path.read_text()
    assert "candidate" in page.ids
    words = page.words
    # the slope changed on 16 March; the within-day slope chart flags it on that very day
    assert "Status: refit since 2026-03-16" in words
    assert "last checked day 2026-04-12" in words
    # coefficient table: term, active ± SE, candidate ± SE
    assert "pallets 2.092 ± 0.0131 2.625 ± 0.0196" in words
    assert "statistical estimates" in words and "not guarantees" in words
    # the fit in the tool's own words, as 'model show' says it (one wording function for both)
    assert "fit window" in words
    assert ("How well it fits: typical scatter around the line 5.375 min from 3,874 loads, "
            "explains 86.8 % of the variation; prediction intervals at 95 %.") in words
    for old in ("Residual standard error", "degrees of freedom", "R²", "s = "):
        assert old not in words, old
    # the same input gives the same bytes, page and charts alike
    again = _report(changed, tmp_path / "again")
    assert sorted(p.name for p in result.path.parent.iterdir()) == sorted(
        p.name for p in again.path.parent.iterdir())
    for file in result.path.parent.iterdir():
        assert file.read_bytes() == (again.path.parent / file.name).read_bytes(), file.name


def test_no_candidate_section_without_a_candidate(calm: World, tmp_path: Path) -> None:
    result = _report(calm, tmp_path / "calm", days=30)
    assert result.candidate is None and result.status == "ok"
    page = Page(result.path.read_text(encoding="utf-8"))
    assert "candidate" not in page.ids and "status" in page.ids
    assert "Candidate version" not in page.words
    assert all((result.path.parent / src).is_file() for src in page.images)
    # the fit window's findings, as `model show` words them (issue 8: the report says them too)
    assert "fit-window-findings" in page.ids
    assert "What its fit window shows" in page.words
    assert "day shocks" in page.words and "weekday rhythm" in page.words
    # what the version learned from its own days, as `model show` says it
    assert "learning" in page.ids
    assert "The within-day slope chart: its reference has learned the slopes of" in page.words


def test_reasons_are_escaped(calm: World) -> None:
    with calm.engine.connect() as conn:
        data = load_report_data(conn, calm.settings, MODEL, night_after(LAST_DAY), 30)
    hostile = "door 4 <script>alert('x')</script> & <b>more</b>"
    data = replace(data, last=replace(data.last, reasons=[hostile]))
    html = render_page(data, night_after(LAST_DAY))
    assert "<script>" not in html and "<b>more" not in html
    assert "&lt;script&gt;" in html
    page = Page(html)
    assert "script" not in page.tags and "b" not in page.tags
    assert hostile in page.words  # shown as text, exactly


def test_a_model_without_checks_still_gets_a_page(fresh: World, tmp_path: Path) -> None:
    result = _report(fresh, tmp_path / "fresh")
    assert result.status is None and result.version == 1
    page = Page(result.path.read_text(encoding="utf-8"))
    assert "Not checked yet" in page.words
    assert page.words.count("Nothing to show yet") == 3  # coverage, CUSUM, residuals
    for src in page.images:
        assert png_size((result.path.parent / src).read_bytes())[0] > 0
    # with nothing checked, the period ends on the day of the last stored row
    with fresh.engine.connect() as conn:
        rows = load_observations(conn, get_model(conn, MODEL))
    assert result.last_day == rows.days.max().astype(date) == date(2026, 3, 7)  # a Saturday


def test_errors_name_the_problem(calm: World, tmp_path: Path) -> None:
    with pytest.raises(NotFoundError, match="no model named 'trailer_dwell'"):
        write_report(calm.settings, "trailer_dwell", tmp_path / "x", engine=calm.engine)
    a_file = tmp_path / "report.html"
    a_file.write_text("not a folder")
    with pytest.raises(InputError, match="is a file"):
        _report(calm, a_file)
    with pytest.raises(InputError, match="at least one day"):
        _report(calm, tmp_path / "y", days=0)
    assert not (tmp_path / "x").exists() and not (tmp_path / "y").exists()
