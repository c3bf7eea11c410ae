"""The within-day slope chart's reference learns from in-control days and stops at a change.

Runs the production day loop (``replay_arrays``: fit, then the nights' ``walk``) on rows drawn
for this test: 14 fit days, 40 in-control days, then the slope 20 % steeper. What is checked is
the learning rule of :mod:`monitor.monitoring.evaluate` (common practice, no source: a
self-starting chart must not learn a change into its reference).
"""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, date, datetime, timedelta

import numpy as np

from monitor.config import Settings
from monitor.domain.model import ModelSpec
from monitor.domain.status import Status
from monitor.monitoring.replay import replay_arrays

START = date(2025, 3, 3)
SPEC = ModelSpec("dock", "load_minutes", ("pallets",), "docked_at")


def _rows(rng: np.random.Generator, days: int, change_from: int
          ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    stamps, xs, ys = [], [], []
    for d in range(days):
        n = 90
        x = rng.uniform(4, 30, n)
        slope = 2.1 * (1.2 if d >= change_from else 1.0)
        y = 9 + slope * x + 2.5 * rng.standard_normal() + 5 * rng.standard_normal(n)
        stamps.append(np.full(n, np.datetime64(START + timedelta(days=d), "D")))
        xs.append(x)
        ys.append(y)
    return np.concatenate(stamps), np.concatenate(xs)[:, None], np.concatenate(ys)


def _walk(settings: Settings, seed: int, fit_days: int, days: int, change_from: int
          ) -> tuple[np.ndarray, list]:
    """Fit on the first ``fit_days`` days of ``_rows`` and walk the rest; the slope chart's
    limits and the checks."""
    days_, x, y = _rows(np.random.default_rng(seed), days, change_from)
    _, version, checks = replay_arrays(SPEC, settings, days_, x, y,
                                       START + timedelta(days=fit_days - 1),
                                       now=datetime(2030, 1, 1, tzinfo=UTC))
    assert version.baseline.slope_limits is not None
    return np.asarray(version.baseline.slope_limits.array()), list(checks)


def test_the_reference_learns_in_control_days_and_stops_at_the_refit() -> None:
    fit_days, calm, changed = 14, 40, 20
    settings = Settings().for_model("dock")
    assert settings.check.slope_chart_reference == "learning"
    h, checks = _walk(settings, 12, fit_days, fit_days + calm + changed, fit_days + calm)
    watch = settings.check.watch_cusum_fraction
    learned = [c.state.learning.slope_days for c in checks]
    for before, check, after in zip([0, *learned], checks, learned, strict=False):
        high = (np.maximum(check.state.slope_upper, check.state.slope_lower) > watch * h).any()
        if check.status == Status.REFIT or high:  # a sign of change is never learned
            assert after == before, check.day
    change_day = START + timedelta(days=fit_days + calm)
    in_control = [c for c in checks if c.day < change_day]
    assert all(c.status != Status.REFIT for c in in_control)
    delay = settings.check.slope_learn_delay_days  # days wait this long before they are learned
    assert in_control[-1].state.learning.slope_days >= calm - delay - 5  # nearly every calm day
    first_refit = next(c for c in checks if c.status == Status.REFIT)
    assert first_refit.day >= change_day and first_refit.state.learning.stopped
    later = [c.state.learning.slope_days for c in checks if c.day >= first_refit.day]
    assert len(set(later)) == 1  # no day learned after the refit (none acknowledged here)
    assert later[0] <= in_control[-1].state.learning.slope_days + (first_refit.day
                                                                   - change_day).days


def test_a_day_is_learned_only_after_the_delay_and_a_sign_of_change_drops_the_days_held() -> None:
    """With ``slope_learn_delay_days = 7`` a day joins the reference only after 7 later days with
    slopes passed below the watch line; the days held back are dropped at a sign of change, so
    a 20 % steeper slope caught within a week is never learned."""
    fit_days, calm, changed, delay = 14, 40, 20, 7
    base = Settings().for_model("dock")
    settings = replace(base, check=replace(base.check, slope_learn_delay_days=delay))
    h, checks = _walk(settings, 12, fit_days, fit_days + calm + changed, fit_days + calm)
    watch = settings.check.watch_cusum_fraction
    change_day = START + timedelta(days=fit_days + calm)
    for i, check in enumerate(checks):
        learning = check.state.learning
        assert len(learning.slope_pending) <= delay
        assert learning.slope_days <= max(0, i + 1 - delay)  # every day waits its turn
        high = (np.maximum(check.state.slope_upper, check.state.slope_lower) > watch * h).any()
        if high or check.status == Status.REFIT:
            assert learning.slope_pending == (), check.day
    in_control = [c for c in checks if c.day < change_day]
    assert in_control[-1].state.learning.slope_days >= calm - delay - 5
    first_refit = next(c for c in checks if c.status == Status.REFIT)
    assert first_refit.day < change_day + timedelta(days=delay)
    # no changed day was learned: what was learned by the refit stood on the calm days alone
    learned_by_change = in_control[-1].state.learning
    learned_at_refit = first_refit.state.learning
    assert learned_at_refit.slope_days - learned_by_change.slope_days \
        <= len(learned_by_change.slope_pending)
    assert learned_at_refit.slope_pending == () and learned_at_refit.stopped


def test_two_predictors_chart_four_lanes_and_name_the_one_that_moved() -> None:
    """Two predictors and two lanes each: the chart steps on four lanes, and a 20 % steeper
    second slope is what leads it when the refit comes (the first stays as fitted)."""
    rng = np.random.default_rng(0)
    spec = ModelSpec("dock", "load_minutes", ("pallets", "crates"), "docked_at")
    fit_days, calm, changed, n = 30, 20, 30, 120
    stamps, xs, ys = [], [], []
    for d in range(fit_days + calm + changed):
        x = np.column_stack([rng.uniform(4, 30, n), rng.uniform(0, 40, n)])
        second = 0.8 * (1.2 if d >= fit_days + calm else 1.0)
        y = 9 + 2.1 * x[:, 0] + second * x[:, 1] + 2.5 * rng.standard_normal() \
            + 5 * rng.standard_normal(n)
        stamps.append(np.full(n, np.datetime64(START + timedelta(days=d), "D")))
        xs.append(x)
        ys.append(y)
    settings = Settings().for_model("dock")
    _, version, checks = replay_arrays(spec, settings, np.concatenate(stamps),
                                       np.concatenate(xs), np.concatenate(ys),
                                       START + timedelta(days=fit_days - 1),
                                       now=datetime(2030, 1, 1, tzinfo=UTC))
    assert version.baseline.slope_limits is not None
    assert len(version.baseline.slope_limits.array()) == 4  # 2 predictors x 2 lanes
    change_day = START + timedelta(days=fit_days + calm)
    assert all(c.status != Status.REFIT for c in checks if c.day < change_day)
    first_refit = next(c for c in checks if c.status == Status.REFIT)
    assert first_refit.day >= change_day
    chart = first_refit.details.slope_chart
    assert chart is not None and chart.predictor == 1 and chart.upward
    assert chart.value > chart.h


def test_a_version_fitted_on_enough_days_learns_each_day_at_once() -> None:
    """Only a version fitted on fewer than ``learn_until_days`` days holds its days back; one
    fitted on more has a reference strong enough that a day is learned the day it is checked
    (holding back would only make neighbouring days share the reference's error)."""
    fit_days = 45
    settings = Settings().for_model("dock")
    assert settings.check.slope_learn_delay_days > 0 and fit_days >= \
        settings.check.learn_until_days
    _, checks = _walk(settings, 5, fit_days, fit_days + 5, change_from=10_000)
    assert [c.state.learning.slope_days for c in checks] == [1, 2, 3, 4, 5]
    assert all(c.state.learning.slope_pending == () for c in checks)
