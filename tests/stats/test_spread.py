"""Spread: variance-ratio F test on within-day residual variance."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from monitor.stats.day_effects import day_effects_of_fit, day_residuals
from monitor.stats.moments import DayMoments
from monitor.stats.ols import fit_ols
from monitor.stats.spread import spread_test


def _window(rng, days, per_day, tau, sigma, slope=2.0, intercept=10.0):
    labels = np.repeat(np.arange(days), per_day)
    x = rng.uniform(5, 30, len(labels))
    y = intercept + slope * x + rng.normal(0, tau, days)[labels] + rng.normal(0, sigma, len(labels))
    return DayMoments.from_rows(labels, np.column_stack([x, y])), x, y, labels


def _fitted(rng, tau, sigma):
    table, x, y, _ = _window(rng, 60, 80, tau, sigma)
    fit = fit_ols(x, y)
    effects = day_effects_of_fit(table, fit.coef)
    return fit, effects


# The classical two-sample variance-ratio F test (any statistics text; scipy.stats.f as the
# reference distribution): statistic and p-value recomputed directly from raw residuals.
def test_within_day_statistic_equals_direct_variance_ratio():
    rng = np.random.default_rng(2)
    fit, effects = _fitted(rng, 2.0, 5.0)
    table, x, y, labels = _window(rng, 20, 30, 2.0, 6.5)
    resid = y - fit.predict(x)
    within = sum(((resid[labels == d] - resid[labels == d].mean()) ** 2).sum() for d in range(20))
    df = len(resid) - 20
    result = spread_test(day_residuals(table, fit.coef), fit.s, fit.dof, effects.sigma_w2,
                         effects.df_within)
    assert result.method == "within-day"
    assert result.statistic == pytest.approx(within / df / effects.sigma_w2, rel=1e-9)
    assert result.pvalue == pytest.approx(stats.f.sf(result.statistic, df, effects.df_within))
    assert result.ratio == pytest.approx(np.sqrt(np.mean(resid**2)) / fit.s, rel=1e-9)
    assert result.pvalue < 1e-6  # sigma 5 -> 6.5 over 600 rows is plain to see


# Calibration with day effects and a shifted line (common practice, no source): the
# within-day test neither reacts to day shocks nor to a bias, so its size stays nominal.
def test_size_is_nominal_with_day_effects_and_a_bias():
    rng = np.random.default_rng(5)
    fit, effects = _fitted(rng, 3.0, 6.0)
    rejections = 0
    reps = 400
    for _ in range(reps):
        table, *_ = _window(rng, 28, 40, 3.0, 6.0, intercept=14.0)
        result = spread_test(day_residuals(table, fit.coef), fit.s, fit.dof, effects.sigma_w2,
                             effects.df_within)
        rejections += result.pvalue < 0.05
    assert rejections / reps < 0.05 + 3 * np.sqrt(0.05 * 0.95 / reps)


def test_one_row_a_day_falls_back_to_total_variance():
    rng = np.random.default_rng(6)
    fit, effects = _fitted(rng, 0.0, 4.0)
    table, x, y, _ = _window(rng, 15, 1, 0.0, 4.0)
    result = spread_test(day_residuals(table, fit.coef), fit.s, fit.dof, effects.sigma_w2,
                         effects.df_within)
    resid = y - fit.predict(x)
    assert result.method == "total"
    assert result.statistic == pytest.approx(np.mean(resid**2) / fit.s**2, rel=1e-9)
    assert result.df_num == 15
