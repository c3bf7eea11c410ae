"""Held-out scoring of a version and the day-blocked paired test of squared errors."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from monitor.stats.holdout import holdout_score, loss_difference_test
from monitor.stats.ols import fit_ols
from monitor.stats.prediction import PredictionModel


def _rows(rng: np.random.Generator, n: int, slope: float):
    x = rng.uniform(5, 40, n)
    days = np.datetime64("2026-05-01") + np.sort(rng.integers(0, 12, n)).astype("timedelta64[D]")
    y = 12 + slope * x + rng.normal(0, 4, n)
    return x, y, days


# statsmodels OLS get_prediction(...).summary_frame() obs_ci as the reference library: the
# held-out coverage, bias and RMSE are those of its prediction intervals and predictions.
@pytest.mark.parametrize("level", [0.9, 0.95])
def test_holdout_score_matches_statsmodels_prediction_intervals(level):
    rng = np.random.default_rng(5)
    x_fit, y_fit, _ = _rows(rng, 300, 2.1)
    x_new, y_new, days = _rows(rng, 200, 2.5)
    ours = holdout_score(PredictionModel.from_fit(fit_ols(x_fit[:, None], y_fit, ("pallets",))),
                         x_new[:, None], y_new, days, level)
    ref = sm.OLS(y_fit, sm.add_constant(x_fit)).fit()
    frame = ref.get_prediction(sm.add_constant(x_new)).summary_frame(alpha=1 - level)
    inside = (y_new >= frame["obs_ci_lower"]) & (y_new <= frame["obs_ci_upper"])
    residual = y_new - frame["mean"].to_numpy()
    assert ours.coverage.covered == int(inside.sum())
    assert ours.bias == pytest.approx(residual.mean(), rel=1e-10)
    assert ours.rmse == pytest.approx(np.sqrt(np.mean(residual**2)), rel=1e-10)
    width = (frame["obs_ci_upper"] - frame["obs_ci_lower"]).mean()
    assert ours.mean_width == pytest.approx(width, rel=1e-10)
    assert ours.days == len(np.unique(days)) and ours.n == 200


# scipy.stats.ttest_1samp as the reference: the paired test is a one-sample t test on the day
# means of the squared-error differences (Diebold & Mariano 1995 with days as blocks).
@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 10_000), days=st.integers(2, 15), rows=st.integers(1, 30))
def test_loss_difference_is_a_t_test_on_day_means(seed, days, rows):
    rng = np.random.default_rng(seed)
    day = np.repeat(np.arange(days), rng.integers(1, rows + 1, days))
    a, b = rng.normal(0, 3, len(day)), rng.normal(0, 2, len(day))
    ours = loss_difference_test(day, a, b)
    diff = a**2 - b**2
    means = np.array([diff[day == d].mean() for d in range(days)])
    ref = stats.ttest_1samp(means, 0.0, alternative="greater")
    assert ours.statistic == pytest.approx(ref.statistic, rel=1e-9)
    assert ours.pvalue == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)
    assert ours.df == days - 1


def test_loss_difference_is_calibrated_when_both_versions_are_equally_good():
    """Under H0 (two equally good forecasts, day shocks shared) it rejects about 5 %."""
    rng = np.random.default_rng(17)
    rejections = 0
    trials = 2000
    for _ in range(trials):
        day = np.repeat(np.arange(8), 40)
        shock = np.repeat(rng.normal(0, 2, 8), 40)
        a = shock + rng.normal(0, 3, len(day))
        b = shock + rng.normal(0, 3, len(day))
        rejections += loss_difference_test(day, a, b).pvalue < 0.05
    # binomial tolerance: 4 standard errors around 0.05 at 2000 trials (about ±0.02)
    assert abs(rejections / trials - 0.05) < 4 * np.sqrt(0.05 * 0.95 / trials)


def test_one_day_gives_no_verdict():
    result = loss_difference_test(np.zeros(10), np.ones(10), np.zeros(10))
    assert np.isnan(result.pvalue) and result.df == 0
