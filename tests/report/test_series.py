"""The charts' data, checked without drawing: against statsmodels and against the stored checks.

Reference library: statsmodels (``OLS(...).fit().get_prediction(x).summary_frame(alpha)``, columns
``obs_ci_lower`` / ``obs_ci_upper`` for the prediction interval of a new observation, and
``se_obs`` for its standard error), fitted on the same stored rows as the version.
"""

from __future__ import annotations

from datetime import date, timedelta

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from monitor.domain.version import Version
from monitor.report.page import load_report_data
from monitor.report.series import (
    calendar,
    coverage_series,
    cusum_series,
    residual_series,
    version_line,
)
from monitor.store.checks import load_checks
from monitor.store.models import get_model
from monitor.store.observations import load_observations
from monitor.store.versions import list_versions
from tests.support.world import LAST_DAY, MODEL, World, night_after


def _versions(world: World) -> list[Version]:
    with world.engine.connect() as conn:
        return list_versions(conn, get_model(conn, MODEL).id)


def _statsmodels_fit(world: World, version: Version):
    with world.engine.connect() as conn:
        rows = load_observations(conn, get_model(conn, MODEL), version.fit_start,
                                 version.fit_end)
    assert len(rows) == version.line.n
    return sm.OLS(rows.y, sm.add_constant(rows.x[:, 0])).fit()


@pytest.mark.parametrize("number", [1, 2], ids=["active", "candidate"])
def test_band_equals_statsmodels_prediction_interval(changed: World, number: int) -> None:
    version = next(v for v in _versions(changed) if v.number == number)
    grid = np.linspace(1.0, 40.0, 53)  # beyond the fitted range on both sides, on purpose
    line = version_line(version, grid)
    reference = _statsmodels_fit(changed, version).get_prediction(sm.add_constant(grid))
    frame = reference.summary_frame(alpha=1.0 - version.level)
    np.testing.assert_allclose(line.mean, frame["mean"], rtol=1e-9)
    np.testing.assert_allclose(line.lower, frame["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(line.upper, frame["obs_ci_upper"], rtol=1e-9)
    assert (line.fit_x_min, line.fit_x_max) == (float(version.line.x_min[0]),
                                                float(version.line.x_max[0]))


def test_scatter_series_of_the_report(changed: World) -> None:
    with changed.engine.connect() as conn:
        data = load_report_data(conn, changed.settings, MODEL, night_after(LAST_DAY), 90)
        rows = load_observations(conn, data.model, data.first_day, data.last_day)
    scatter = data.scatter
    assert [(line.number, line.state) for line in scatter.lines] == [(1, "active"),
                                                                    (2, "candidate")]
    assert data.last_day == LAST_DAY and data.first_day == LAST_DAY - timedelta(days=89)
    # the last coverage window (14 days by default) is highlighted
    assert scatter.recent_from == LAST_DAY - timedelta(days=13)
    expected = rows.days >= np.datetime64(LAST_DAY - timedelta(days=13))
    np.testing.assert_array_equal(scatter.recent, expected)
    assert 0 < scatter.recent.sum() < len(scatter.recent)
    np.testing.assert_array_equal(scatter.x, rows.x[:, 0])
    grid = scatter.lines[0].x
    assert grid.min() <= min(scatter.x.min(), data.active.line.x_min[0])
    assert grid.max() >= max(scatter.x.max(), data.active.line.x_max[0])


def test_coverage_series_equals_the_stored_checks_with_gaps(calm: World) -> None:
    with calm.engine.connect() as conn:
        checks = load_checks(conn, get_model(conn, MODEL).id)
    dropped = checks[10].day  # a calendar day with no check row at all
    kept = [c for c in checks if c.day != dropped]
    series = coverage_series(kept, 0.95)
    assert series.days == calendar(checks[0].day, checks[-1].day)
    empty_days = [c.day for c in checks if c.n == 0]
    assert empty_days, "the scenario has days without loads (Sundays)"
    by_day = {c.day: c for c in kept}
    for i, day in enumerate(series.days):
        check = by_day.get(day)
        if check is None or check.n == 0:
            assert np.isnan(series.coverage[i]), day  # a gap, not a zero
            continue
        assert series.n[i] == check.n
        assert series.coverage[i] == pytest.approx(check.covered / check.n, abs=1e-15)
        assert series.wilson_low[i] == check.wilson_low
        assert series.wilson_high[i] == check.wilson_high
    assert series.n[series.days.index(dropped)] == 0
    assert series.level == 0.95 and not series.empty
    assert coverage_series([], 0.95).empty


def test_cusum_series_equals_the_stored_paths(changed: World) -> None:
    with changed.engine.connect() as conn:
        checks = load_checks(conn, get_model(conn, MODEL).id)
    series = cusum_series(checks)
    for i, check in enumerate(checks):  # the checks cover every calendar day here
        assert series.days[i] == check.day
        if check.n == 0:
            assert np.isnan(series.upper[i]) and np.isnan(series.lower[i])
        else:
            assert series.upper[i] == check.cusum_upper
            assert series.lower[i] == -check.cusum_lower
        assert series.h[i] == check.cusum_h
    assert series.signal_days == tuple(c.day for c in checks if c.cusum_signal)
    assert series.signal_days and series.signal_days[0] > date(2026, 3, 16)


def test_residuals_match_the_checks_and_statsmodels(changed: World) -> None:
    version = next(v for v in _versions(changed) if v.number == 1)
    with changed.engine.connect() as conn:
        model = get_model(conn, MODEL)
        checks = load_checks(conn, model.id)
        rows = load_observations(conn, model, checks[0].day, checks[-1].day)
    series = residual_series(rows, checks, _versions(changed))
    # every checked row scored, and per day the rows inside equal the stored 'covered'
    for check in checks:
        today = series.row_day == np.datetime64(check.day)
        assert (today.sum(), series.inside[today].sum()) == (check.n, check.covered)
    # z = (y - yhat) / se_obs, with statsmodels' prediction standard error of a new observation
    prediction = _statsmodels_fit(changed, version).get_prediction(sm.add_constant(rows.x[:, 0]))
    z = (rows.y - prediction.predicted_mean) / prediction.se_obs
    np.testing.assert_allclose(series.z, z, rtol=1e-8, atol=1e-10)
    # the interval's edge in z units: Student's t quantile (scipy.stats as the reference)
    t = stats.t.ppf(0.5 + version.level / 2, version.line.dof)
    assert np.nanmax(np.abs(series.limit - t)) < 1e-12
    position = {d: i for i, d in enumerate(series.days)}
    for check in checks:
        mean = series.day_mean[position[check.day]]
        if check.n == 0:
            assert np.isnan(mean)
        else:
            assert mean == pytest.approx(z[rows.days == np.datetime64(check.day)].mean(),
                                         rel=1e-8)
