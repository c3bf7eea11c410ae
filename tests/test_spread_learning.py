"""A self-starting version refines the day-to-day spread its coverage test assumes.

Runs the production day loop (``replay_arrays``: fit, then the nights' ``walk``) on rows drawn
for this test: a version fitted on a calm fortnight (day shocks 0.6 of their usual size, as
two weeks sometimes are by chance), then days of the usual spread. What is checked is the rule of
:meth:`monitor.monitoring.context.VersionContext.miss_law` (common practice, no source: a law
learned from in-control days, as the level is): the learned law expects the misses the usual
spread gives, so the same window's coverage is less surprising to it, and a version that does
not self-start keeps its fit window's law.
"""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta

import numpy as np

from monitor.config import Settings
from monitor.domain.model import ModelSpec
from monitor.monitoring.context import VersionContext
from monitor.monitoring.replay import replay_arrays

START = date(2025, 3, 3)
SPEC = ModelSpec("dock", "load_minutes", ("pallets",), "docked_at")


def _rows(rng: np.random.Generator, days: int, calm_days: int
          ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    stamps, xs, ys = [], [], []
    for d in range(days):
        n = 80
        x = rng.uniform(4, 30, n)
        shock = 4.0 * rng.standard_normal() * (0.6 if d < calm_days else 1.0)
        y = 9 + 2.1 * x + shock + 5 * rng.standard_normal(n)
        stamps.append(np.full(n, np.datetime64(START + timedelta(days=d), "D")))
        xs.append(x)
        ys.append(y)
    return np.concatenate(stamps), np.concatenate(xs)[:, None], np.concatenate(ys)


def _walk(fit_days: int, days: int, seed: int = 4):
    rng = np.random.default_rng(seed)
    stamps, x, y = _rows(rng, days, calm_days=fit_days)
    settings = Settings().for_model("dock")
    _, version, checks = replay_arrays(SPEC, settings, stamps, x, y,
                                       START + timedelta(days=fit_days - 1),
                                       now=datetime(2030, 1, 1, tzinfo=UTC))
    return VersionContext.build(version, settings.check), checks


def test_a_short_fit_learns_the_usual_day_to_day_spread() -> None:
    ctx, checks = _walk(fit_days=14, days=14 + 30)
    assert ctx.learn_base is not None  # fitted on two weeks: self-starting
    state = checks[-1].state
    assert state.learning.level.n == 40 - 14  # learned until the level counts 40 days
    assert all(c.status.value == "ok" or c.status.value == "watch" for c in checks)
    fit_law, learned_law = ctx.misses, ctx.miss_law(state)
    assert checks[0].state.learning.level.n == 1
    assert ctx.miss_law(checks[0].state) is not fit_law  # the second day meets a learned law
    # the learned day-to-day variance is near the truth (16) and far above the calm fit's
    assert 2 * fit_law.base.wide.tau2 < learned_law.base.wide.tau2
    assert 8.0 < learned_law.base.wide.tau2 < 30.0
    # so a window with as many misses as the usual spread gives (the learned law's own
    # expectation) is no surprise to it, while the fit window's law takes it for a finding
    rows = [80] * 14
    misses = round(learned_law.base.wide.miss_rate * sum(rows))
    before = fit_law.test(rows, sum(rows) - misses, 0.95).pvalue_low
    after = learned_law.test(rows, sum(rows) - misses, 0.95).pvalue_low
    assert before < 0.001 < 0.1 < after


def test_a_version_fitted_on_enough_days_keeps_its_law() -> None:
    ctx, checks = _walk(fit_days=45, days=45 + 10)
    assert ctx.learn_base is None
    assert all(ctx.miss_law(c.state) is ctx.misses for c in checks)
