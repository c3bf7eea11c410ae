"""Promotions, rollbacks, acknowledgements and corrections marked on every time chart.

What is checked is the data handed to the charts (the marks read from the audit log), the
artists drawn from them and the captions written while drawing, not pixels.
"""

from __future__ import annotations

import sqlite3
from datetime import UTC, date, datetime
from pathlib import Path

import matplotlib.dates as mdates
from matplotlib.figure import Figure

import monitor.alerts.service as alert_service
from monitor.alerts.service import queue_night
from monitor.config import parse_settings
from monitor.report.charts import ChartPanel, draw_coverage, draw_cusum
from monitor.report.marks import Mark, marks_from
from monitor.report.page import load_report_data, report_charts
from monitor.report.series import coverage_series, cusum_series
from monitor.store.audit import AuditEntry
from monitor.store.checks import load_checks
from monitor.store.models import get_model
from tests.report.conftest import ACKED, HOSTILE_REASON, PROMOTED, TEAM_LAST, Team
from tests.support.world import MODEL, WORDS, night_after

# worded as `fitwatch audit` words them (monitor.interface.audit_view.what_was_done)
EXPECTED = (Mark(ACKED, "ack", "acknowledged the refit advice standing since 2026-03-16",
                 HOSTILE_REASON),
            Mark(PROMOTED, "promote", "promoted version 2 in place of version 1",
                 "the new layout"))


def _entry(action: str, day: date | None, **details) -> AuditEntry:
    return AuditEntry(1, datetime(2026, 4, 1, tzinfo=UTC), 1, action, "test", "why", None, day,
                      details)


def test_marks_from_the_audit_log() -> None:
    entries = [
        _entry("fit", date(2026, 3, 9)),  # not an action on the charts
        _entry("promote", date(2026, 2, 28), version=2),  # before the period
        _entry("rollback", date(2026, 3, 20), version=4, copy_of=1, previous=3),
        _entry("correct", date(2026, 3, 2), replaced=3, days=["2026-03-02"], source="a.csv",
               batch=7),
        _entry("ack", date(2026, 4, 1), status="watch", since="2026-03-28"),  # the next day
        _entry("ack", date(2026, 4, 2), status="refit"),  # two days after: left out
        _entry("failure", None),
    ]
    marks = marks_from(entries, date(2026, 3, 1), date(2026, 3, 31))
    assert [(m.day, m.action, m.text) for m in marks] == [
        (date(2026, 3, 2), "correct",
         "corrected 3 row(s) on 2026-03-02 from a.csv (batch 7; the replaced values are kept)"),
        (date(2026, 3, 20), "rollback", "rolled back to version 1 (active again as version 4)"),
        (date(2026, 4, 1), "ack", "acknowledged the watch advice standing since 2026-03-28"),
    ]
    assert {m.reason for m in marks} == {"why"}


def test_the_report_marks_the_acknowledgement_and_the_promotion(team: Team) -> None:
    with team.engine.connect() as conn:
        data = load_report_data(conn, team.settings, MODEL, night_after(TEAM_LAST), 90)
    assert data.marks == EXPECTED
    pictures = {c.file: c.caption for c in report_charts(data)}
    said = ("Vertical lines mark promotions and acknowledgements on the day each took effect: "
            f"{EXPECTED[0].text} from {ACKED}; {EXPECTED[1].text} from {PROMOTED}.")
    for file in ("coverage.png", "cusum.png", "residuals.png"):  # every time chart
        assert said in pictures[file], file
    assert "Vertical lines" not in pictures["scatter.png"]  # not a time chart


def test_marks_are_drawn_where_they_took_effect(team: Team) -> None:
    with team.engine.connect() as conn:
        checks = load_checks(conn, get_model(conn, MODEL).id)
    for draw, series in ((draw_cusum, cusum_series(checks)),
                         (draw_coverage, coverage_series(checks, 0.95))):
        ax = Figure().subplots()
        draw(ax, series, marks=EXPECTED)
        drawn = {line.get_label(): line.get_xdata()[0] for line in ax.lines
                 if line.get_label() in ("acknowledgement", "promotion")}
        assert drawn == {"acknowledgement": mdates.date2num(ACKED),
                         "promotion": mdates.date2num(PROMOTED)}
        legend = [t.get_text() for t in ax.get_legend().get_texts()]
        assert "acknowledgement" in legend and "promotion" in legend


def test_the_alert_chart_carries_the_marks(team: Team, tmp_path: Path, monkeypatch) -> None:
    # a copy of the world (SQLite's online backup), with a recipient for the digests
    copy = tmp_path / "copy.db"
    with sqlite3.connect(team.engine.url.database or "") as source, \
            sqlite3.connect(copy) as target:
        source.backup(target)
    settings = parse_settings({"database": {"url": f"sqlite:///{copy}"},
                               "schedule": {"timezone": "Europe/Berlin"},
                               "alerts": {"to": ["lead@example.com"],
                                          "eml_dir": str(tmp_path / "outbox")},
                               "models": WORDS}, "<alert chart test>")
    drawn: list[ChartPanel] = []
    real = alert_service.digest_chart_png

    def keep(panels):
        drawn.extend(panels)
        return real(panels)

    monkeypatch.setattr(alert_service, "digest_chart_png", keep)
    # the night the promotion took effect: the digest says so, its chart shows both actions
    assert queue_night(settings, PROMOTED, now=night_after(PROMOTED)) == 1
    (panel,) = drawn
    assert panel.model == MODEL and tuple(panel.marks) == EXPECTED
