"""Charts of a model with two predictors, and captions that say what each chart draws.

Reference: statsmodels, ``OLS(...).fit().get_prediction(x).summary_frame(alpha)`` (columns
``mean``, ``obs_ci_lower``, ``obs_ci_upper``) and ``se_obs``, fitted on the same ten Longley years
(Longley 1967, the copy shipped with statsmodels) as the version. Before these charts, such a
model's report drew its rows against the first predictor only, with no line, under a caption
that described a line and a band.
"""

from __future__ import annotations

import numpy as np
import statsmodels.api as sm
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure

from monitor.report.charts import Nouns
from monitor.report.page import load_report_data, report_charts, write_report
from monitor.report.row_charts import draw_planned, draw_predictor_residuals
from tests.report.conftest import HOSTILE_COLUMN, LONGLEY, LONGLEY_LAST, Team
from tests.support.page import Page
from tests.support.world import LAST_DAY, MODEL, World, night_after


def _data(team: Team):
    with team.engine.connect() as conn:
        return load_report_data(conn, team.settings, LONGLEY, night_after(LONGLEY_LAST), 90)


def _reference(team: Team):
    """statsmodels on the fit window's ten rows, predicting the six checked rows."""
    frame = team.longley
    fit, new = frame.iloc[:10], frame.iloc[10:]
    predictors = ["GNP", HOSTILE_COLUMN]
    ols = sm.OLS(fit["TOTEMP"], sm.add_constant(fit[predictors])).fit()
    prediction = ols.get_prediction(sm.add_constant(new[predictors], has_constant="add"))
    return new, prediction


def test_checked_rows_are_scored_as_statsmodels_predicts_them(team: Team) -> None:
    scored = _data(team).scored
    new, prediction = _reference(team)
    frame = prediction.summary_frame(alpha=0.05)
    assert len(scored) == 6 and [s.number for s in scored.scorers] == [1]
    np.testing.assert_allclose(scored.x, new[["GNP", HOSTILE_COLUMN]].to_numpy(), rtol=0)
    np.testing.assert_allclose(scored.y, new["TOTEMP"], rtol=0)
    np.testing.assert_allclose(scored.planned, frame["mean"], rtol=1e-9)
    np.testing.assert_allclose(scored.lower, frame["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(scored.upper, frame["obs_ci_upper"], rtol=1e-9)
    z = (new["TOTEMP"].to_numpy() - prediction.predicted_mean) / prediction.se_obs
    np.testing.assert_allclose(scored.z, z, rtol=1e-8)
    np.testing.assert_array_equal(scored.inside,
                                  (scored.y >= scored.lower) & (scored.y <= scored.upper))


def test_observed_against_planned_draws_each_rows_interval(team: Team) -> None:
    scored = _data(team).scored
    fig = Figure()
    ax = fig.subplots()
    draw_planned(ax, scored, y_label="TOTEMP", nouns=Nouns())
    (bars,) = [c for c in ax.collections if isinstance(c, LineCollection)]
    segments = np.array(bars.get_segments())
    np.testing.assert_allclose(segments[:, 0], np.column_stack([scored.planned, scored.lower]))
    np.testing.assert_allclose(segments[:, 1], np.column_stack([scored.planned, scored.upper]))
    labels = [line.get_label() for line in ax.lines]
    assert "observed = planned" in labels and "inside its interval" in labels


def test_a_residual_panel_per_predictor(team: Team) -> None:
    scored = _data(team).scored
    fig = Figure()
    draw_predictor_residuals(fig, scored, ("GNP", HOSTILE_COLUMN))
    panels = [ax for ax in fig.axes if ax.get_visible() and ax.axison]
    assert [ax.get_title() for ax in panels] == ["residuals against GNP",
                                                 f"residuals against {HOSTILE_COLUMN}"]
    for i, ax in enumerate(panels):
        (dots,) = [line for line in ax.lines if line.get_label() == "inside its interval"]
        np.testing.assert_array_equal(dots.get_xdata(), scored.x[scored.inside, i])
        np.testing.assert_array_equal(dots.get_ydata(), scored.z[scored.inside])


def test_two_predictor_charts_and_their_captions(team: Team) -> None:
    pictures = report_charts(_data(team))
    assert [c.file for c in pictures] == ["planned.png", "residuals_by_predictor.png",
                                          "coverage.png", "cusum.png", "residuals.png"]
    planned, panels = pictures[0].caption, pictures[1].caption
    assert "(6 in all)" in planned and "95 % prediction interval" in planned
    assert "planned by version 1" in planned and "observed = planned" in planned
    assert f"One panel per predictor (GNP and {HOSTILE_COLUMN})" in panels
    assert "None of them fell outside its interval." in panels
    for chart in pictures:
        assert chart.png.startswith(b"\x89PNG") and chart.caption and chart.alt


def test_two_predictor_page_claims_no_line_it_does_not_draw(team: Team, tmp_path) -> None:
    result = write_report(team.settings, LONGLEY, tmp_path / "page", engine=team.engine,
                          now=night_after(LONGLEY_LAST))
    page = Page(result.path.read_text(encoding="utf-8"))
    assert page.images == ["planned.png", "residuals_by_predictor.png", "coverage.png",
                           "cusum.png", "residuals.png"]
    assert "The solid diagonal is observed = planned" in page.words
    assert "solid line" not in page.words.lower() and "lines are drawn" not in page.words
    assert f"One panel per predictor (GNP and {HOSTILE_COLUMN})" in page.words  # as text
    assert "b" not in page.tags


def test_one_predictor_caption_names_the_lines_drawn(changed: World, calm: World) -> None:
    with changed.engine.connect() as conn:
        data = load_report_data(conn, changed.settings, MODEL, night_after(LAST_DAY), 90)
    scatter = report_charts(data)[0]
    assert scatter.file == "scatter.png"
    n = len(data.scatter.y)
    assert f"Each circle is one load ({n} in all)" in scatter.caption
    assert "The solid line is version 1 (active)'s planned value" in scatter.caption
    assert "The dashed line is version 2 (candidate)'s planned value" in scatter.caption
    with calm.engine.connect() as conn:
        data = load_report_data(conn, calm.settings, MODEL, night_after(LAST_DAY), 30)
    caption = report_charts(data)[0].caption
    assert "version 1 (active)" in caption
    assert "candidate" not in caption and "dashed" not in caption


def test_time_chart_captions_follow_the_data(changed: World, team: Team) -> None:
    with changed.engine.connect() as conn:
        data = load_report_data(conn, changed.settings, MODEL, night_after(LAST_DAY), 90)
    cusum = next(c for c in report_charts(data) if c.file == "cusum.png").caption
    days = data.cusum.signal_days
    assert len(days) > 1
    assert f"Diamonds mark the {len(days)} days the chart signalled, the first {days[0]}." in cusum
    cusum = next(c for c in report_charts(_data(team)) if c.file == "cusum.png").caption
    assert "The chart did not signal in this period." in cusum and "Diamonds" not in cusum
