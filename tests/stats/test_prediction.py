"""Prediction intervals and standardized predictive residuals."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from monitor.errors import DegenerateDataError
from monitor.stats.ols import fit_ols
from monitor.stats.prediction import PredictionModel
from tests.stats.reference_data import LONGLEY, LONGLEY_NAMES, NORRIS_X, NORRIS_Y


def _summary(x, y, x0, alpha):
    res = sm.OLS(y, sm.add_constant(x)).fit()
    return res.get_prediction(sm.add_constant(x0, has_constant="add")).summary_frame(alpha=alpha)


# statsmodels get_prediction(...).summary_frame(): obs_ci_* is the prediction interval.
@pytest.mark.parametrize("level", [0.90, 0.95, 0.99])
def test_interval_matches_statsmodels_obs_ci_on_norris(level):
    x, y = np.array(NORRIS_X), np.array(NORRIS_Y)
    model = PredictionModel.from_fit(fit_ols(x, y))
    x0 = np.array([0.0, 250.0, 500.0, 1000.0, 1500.0])
    ref = _summary(x, y, x0, 1 - level)
    lower, upper = model.interval(x0, level)
    assert np.allclose(lower, ref["obs_ci_lower"], rtol=1e-10, atol=0)
    assert np.allclose(upper, ref["obs_ci_upper"], rtol=1e-10, atol=0)
    assert np.allclose(model.predict(x0), ref["mean"], rtol=1e-12, atol=1e-12)


# statsmodels get_prediction().summary_frame(alpha=0.05) obs_ci on NIST Norris at x0 = 500
# (computed with statsmodels 0.15, not a published figure; docs/references.md).
def test_norris_interval_at_500():
    model = PredictionModel.from_fit(fit_ols(NORRIS_X, NORRIS_Y))
    lower, upper = model.interval([500.0], 0.95)
    assert lower[0] == pytest.approx(498.9717940541834, rel=1e-12)
    assert upper[0] == pytest.approx(502.62037781872255, rel=1e-12)


# Longley (NIST data) is badly conditioned: the centred leverage keeps the interval at 1e-10.
def test_interval_matches_statsmodels_on_longley():
    data = np.array(LONGLEY)
    x, y = data[:, 1:], data[:, 0]
    model = PredictionModel.from_fit(fit_ols(x, y, LONGLEY_NAMES))
    x0 = x[[0, 7, 15]] * np.array([1.02, 0.99, 1.0, 1.05, 0.97, 1.0])
    ref = _summary(x, y, x0, 0.05)
    lower, upper = model.interval(x0, 0.95)
    assert np.allclose(lower, ref["obs_ci_lower"], rtol=1e-10, atol=0)
    assert np.allclose(upper, ref["obs_ci_upper"], rtol=1e-10, atol=0)


def test_standardized_residual_is_the_studentized_prediction_error():
    rng = np.random.default_rng(11)
    x = rng.uniform(5, 40, 80)
    y = 10 + 2 * x + rng.normal(0, 3, 80)
    model = PredictionModel.from_fit(fit_ols(x, y))
    x0, y0 = np.array([7.0, 20.0, 39.0]), np.array([20.0, 55.0, 90.0])
    ref = _summary(x, y, x0, 0.05)
    se_obs = np.sqrt(ref["mean_se"] ** 2 + model.s**2)
    scores = model.score(x0, y0, 0.95)
    assert np.allclose(scores.z, (y0 - ref["mean"]) / se_obs, rtol=1e-10)
    t = stats.t.ppf(0.975, model.dof)
    assert np.array_equal(scores.inside, np.abs(scores.z) <= t)


# Under a correct model (y0 - yhat0) / (s sqrt(1 + h0)) ~ t(n - p) exactly, so the interval
# covers with probability L (any regression text, e.g. Montgomery, Peck & Vining, Introduction
# to Linear Regression Analysis, §2.5, section from memory). Monte Carlo with a fresh
# fit per replicate; tolerance 4 binomial standard errors.
def test_monte_carlo_coverage_is_nominal():
    rng = np.random.default_rng(2024)
    reps, n, level = 4000, 12, 0.90
    hits = 0
    for _ in range(reps):
        x = rng.uniform(0, 10, n)
        y = 3 + 0.7 * x + rng.normal(0, 2, n)
        model = PredictionModel.from_fit(fit_ols(x, y))
        x0 = rng.uniform(-2, 12, 1)
        y0 = 3 + 0.7 * x0 + rng.normal(0, 2, 1)
        hits += int(model.score(x0, y0, level).inside[0])
    se = np.sqrt(level * (1 - level) / reps)
    assert abs(hits / reps - level) < 4 * se


# Common practice, no source: with many rows and x0 near the centre, the 95 % interval is
# close to the rough "yhat ± 2s" margin. Only a sanity bound: the tool never computes it.
def test_rule_of_thumb_two_s_is_a_sanity_bound_for_large_n():
    rng = np.random.default_rng(5)
    x = rng.uniform(0, 50, 2000)
    y = 4 + 1.5 * x + rng.normal(0, 5, 2000)
    model = PredictionModel.from_fit(fit_ols(x, y))
    lower, upper = model.interval([25.0], 0.95)
    half = (upper - lower)[0] / 2
    assert half == pytest.approx(2 * model.s, rel=0.03)


def test_imported_covariance_round_trips_to_the_same_intervals():
    data = np.array(LONGLEY)
    fit = fit_ols(data[:, 1:], data[:, 0], LONGLEY_NAMES)
    native = PredictionModel.from_fit(fit)
    imported = PredictionModel.from_covariance(fit.terms, fit.coef, fit.s, fit.dof, fit.cov)
    assert imported.n == fit.n
    x0 = data[:4, 1:]
    assert np.allclose(imported.interval(x0)[0], native.interval(x0)[0], rtol=1e-9)


def test_imported_without_covariance_uses_zero_leverage():
    model = PredictionModel.from_covariance(("intercept", "pallets"), [12.0, 2.0], 4.0, 50)
    lower, upper = model.interval([10.0], 0.95)
    t = stats.t.ppf(0.975, 50)
    assert (upper - lower)[0] == pytest.approx(2 * t * 4.0)
    assert not model.has_leverage


def test_rows_outside_the_fitted_range_are_marked_extrapolated():
    model = PredictionModel.from_fit(fit_ols([1.0, 2.0, 3.0, 4.0, 6.0], [2.0, 4.1, 5.9, 8.2, 12.1]))
    scores = model.score([0.5, 3.0, 6.0, 6.5], [1.0, 6.0, 12.0, 13.0])
    assert scores.extrapolated.tolist() == [True, False, False, True]


@pytest.mark.parametrize("bad", [
    dict(s=0.0, dof=10), dict(s=1.0, dof=0),
    dict(s=1.0, dof=10, cov=[[1.0, 2.0], [3.0, 1.0]]),
])
def test_invalid_imported_models_are_refused_with_a_reason(bad):
    with pytest.raises(DegenerateDataError):
        PredictionModel.from_covariance(("intercept", "x"), [1.0, 2.0], **bad)
