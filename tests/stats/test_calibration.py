"""Day standardization of the bias chart and the bootstrap calibration of its interval h."""

from __future__ import annotations

import itertools
from dataclasses import replace

import numpy as np
import pytest
import statsmodels.api as sm

from monitor.errors import DegenerateDataError
from monitor.stats.arl import cusum_arl, solve_h
from monitor.stats.calibration import (
    ChartDesign,
    calibrate_h,
    coef_covariance,
    standardize_days,
)
from monitor.stats.day_effects import day_effects_of_fit
from monitor.stats.moments import DayMoments
from monitor.stats.ols import fit_moments, fit_ols


def _design_of(day, x, y):
    days = DayMoments.from_rows(day, np.column_stack([x, y]))
    fit = fit_moments(days.total())
    return fit, days, ChartDesign.from_fit(fit, days, day_effects_of_fit(days, fit.coef))


@pytest.fixture(scope="module")
def two_predictor_window():
    """20 days of 4 to 30 rows, two predictors, one of them with a strong day-level component."""
    rng = np.random.default_rng(101)
    counts = rng.integers(4, 31, 20)
    day = np.repeat(np.arange(20), counts)
    x1 = np.repeat(rng.uniform(10, 30, 20), counts) + rng.normal(0, 3, counts.sum())
    x2 = rng.normal(50, 10, counts.sum())
    x = np.column_stack([x1, x2])
    y = 5 + 2 * x1 - 0.5 * x2 + rng.normal(0, 1, counts.sum())
    return day, x, y


def _centred_design_matrix(day, x, design):
    return np.column_stack([np.ones(len(day)), x - design.xmean])


def test_design_blocks_equal_raw_row_products(two_predictor_window):
    day, x, y = two_predictor_window
    _, _, design = _design_of(day, x, y)
    xt = _centred_design_matrix(day, x, design)
    z = (day[:, None] == np.arange(20)[None, :]).astype(float)  # day indicators
    np.testing.assert_allclose(design.a, xt.T @ xt, rtol=1e-10, atol=1e-8)
    np.testing.assert_allclose(design.b, xt.T @ z @ z.T @ xt, rtol=1e-10, atol=1e-6)
    assert design.n_rows == len(day) and design.n_days == 20


def test_coef_covariance_without_day_effects_is_the_ols_covariance(two_predictor_window):
    # tau² = 0: sigma_w² (X~ᵀX~)⁻¹, the textbook OLS covariance; statsmodels as the reference
    day, x, y = two_predictor_window
    _, _, design = _design_of(day, x, y)
    xt = _centred_design_matrix(day, x, design)
    ref = sm.OLS(y, xt).fit().normalized_cov_params * 2.5
    np.testing.assert_allclose(coef_covariance(design, 0.0, 2.5), ref, rtol=1e-10, atol=1e-14)


def test_coef_covariance_matches_simulated_ols_under_day_effects(two_predictor_window):
    # Moulton (1986) sandwich A⁻¹(τ²B + σ²A)A⁻¹ (from memory) against the Monte Carlo covariance
    # of fit_ols coefficients, centred (intercept at the fit mean), over redrawn day effects and
    # noise on a fixed design. Per entry, tolerance 4.5 Monte Carlo standard errors of a sample
    # covariance, sqrt((V_ii V_jj + V_ij²) / (R - 1)).
    day, x, _ = two_predictor_window
    tau2, sw2, reps = 4.0, 9.0, 2000
    rng = np.random.default_rng(7)
    beta = np.array([5.0, 2.0, -0.5])
    mean_part = beta[0] + x @ beta[1:]
    thetas = np.empty((reps, 3))
    for r in range(reps):
        shocks = rng.normal(0, np.sqrt(tau2), 20)[day]
        y = mean_part + shocks + rng.normal(0, np.sqrt(sw2), len(day))
        fit = fit_ols(x, y)
        thetas[r] = [fit.coef[0] + fit.xmean @ fit.coef[1:], *fit.coef[1:]]
    _, _, design = _design_of(day, x, mean_part + rng.normal(0, 1, len(day)))
    v = coef_covariance(design, tau2, sw2)
    mc = np.cov(thetas, rowvar=False)
    se = np.sqrt((np.outer(np.diag(v), np.diag(v)) + v**2) / (reps - 1))
    assert np.all(np.abs(mc - v) < 4.5 * se), (mc, v)
    # the day effect matters: the plain OLS variance of the intercept would be far too small
    assert v[0, 0] > 5 * coef_covariance(design, 0.0, tau2 + sw2)[0, 0]


# u_d = rbar_d / D_d is a future day's mean residual in units of its own standard deviation under
# the random-effects model (day shock N(0, tau²), row noise N(0, sigma_w²), estimated line). The
# reference is that model simulated on the window's design, refitted each time with numpy's
# least squares: u is N(0, 1), its variance 1 within four Monte Carlo standard errors
# (sqrt(2 / (R - 1)) for a normal sample variance). Day 0 (10 rows, central) is dominated by
# tau² and sigma_w²/n, day 2 (200 rows, far from the fit's centre) by the line's uncertainty.
def test_standardize_days(two_predictor_window):
    day, x, y = two_predictor_window
    _, _, fitted = _design_of(day, x, y)
    design = replace(fitted, tau2=1.0, sigma_w2=9.0)
    counts = np.array([10, 0, 200])
    xbar = np.array([[20.0, 50.0], [0.0, 0.0], [35.0, 25.0]])
    rng = np.random.default_rng(2024)
    beta = np.array([5.0, 2.0, -0.5])
    xt = np.column_stack([np.ones(len(day)), x])
    reps = 4000
    resid_means = np.empty((reps, 3))
    for r in range(reps):
        window = xt @ beta + rng.normal(0, 1.0, 20)[day] + rng.normal(0, 3.0, len(day))
        b = np.linalg.lstsq(xt, window, rcond=None)[0]
        future = (beta[0] + xbar @ beta[1:] + rng.normal(0, 1.0, 3)
                  + rng.normal(0, 3.0, 3) / np.sqrt(np.maximum(counts, 1)))
        resid_means[r] = future - (b[0] + xbar @ b[1:])
    u = standardize_days(resid_means.ravel(), np.tile(counts, reps), np.tile(xbar, (reps, 1)),
                         design).reshape(reps, 3)
    assert np.isnan(u[:, 1]).all()  # a day without rows has no mean residual
    for d in (0, 2):
        assert abs(u[:, d].var(ddof=1) - 1.0) < 4 * np.sqrt(2 / (reps - 1)), d
        assert abs(u[:, d].mean()) < 4 / np.sqrt(reps), d


def test_design_rejects_a_foreign_day_table(two_predictor_window):
    day, x, y = two_predictor_window
    fit, days, _ = _design_of(day, x, y)
    effects = day_effects_of_fit(days, fit.coef)
    with pytest.raises(ValueError, match="rows"):
        ChartDesign.from_fit(fit, days.select(slice(0, 10)), effects)


# calibration ---------------------------------------------------------------------------------
B0, B1, TAU, SIGMA_W = 20.0, 2.1, 2.5, 6.0  # invented process for property tests


def _window(rng, days=60):
    counts = rng.poisson(80, days)
    day = np.repeat(np.arange(days), counts)
    x = np.repeat(rng.uniform(14, 26, days), counts) + rng.normal(0, 4, counts.sum())
    y = B0 + B1 * x + rng.normal(0, TAU, days)[day] + rng.normal(0, SIGMA_W, counts.sum())
    return _design_of(day, x, y)


def _true_arl(fit, h, scale, future_n, future_x, k=0.5):
    """In-control ARL of a chart (coefficients ``fit``, day scale ``scale``) on the true process.

    A future day's mean residual is ``a + wbar - (b^ - b)ᵀ(1, xbar)``; divided by the chart's
    scale it is ``N(mu_d, w_d²)``. Days are drawn from the process, so ``u`` is the mixture over
    ``future_*``, taken as normal with the mixture's mean and variance.
    """
    error = (fit.coef[0] - B0) + (fit.coef[1] - B1) * future_x
    mu = -error / scale
    w2 = (TAU**2 + SIGMA_W**2 / future_n) / scale**2
    mean = mu.mean()
    return cusum_arl(k, h, mean, np.sqrt((w2 + mu**2).mean() - mean**2))


@pytest.mark.slow
def test_calibrated_chart_keeps_its_promise():
    # Property of Gandy & Kvaløy's (2013) bootstrap: over fit windows, the fraction of charts whose
    # true in-control ARL reaches the target is about the guarantee. M = 200 windows; tolerance is
    # three binomial standard errors, 3 * sqrt(0.9 * 0.1 / 200) = 0.064. Fewer bootstrap draws
    # (200) than the default keep the test fast; tests/benchmarks/sim_calibration.py runs more.
    windows, target, guarantee = 200, 1000.0, 0.90
    rng = np.random.default_rng(20240611)
    future_n = rng.poisson(80, 3000).astype(float)
    future_x = rng.uniform(14, 26, 3000)
    h_known = solve_h(0.5, target)
    calibrated, naive = [], []
    for w in range(windows):
        fit, _, design = _window(rng)
        cal = calibrate_h(design, target_arl=target, guarantee=guarantee, draws=200, seed=w)
        assert cal.calibrated and cal.h > cal.h_known == pytest.approx(h_known)
        ones = np.ones_like(future_n)
        scale = 1.0 / standardize_days(ones, future_n, future_x, design)
        calibrated.append(_true_arl(fit, cal.h, scale, future_n, future_x))
        # naive chart: h for known parameters and a day scale without tau²
        rows = np.column_stack([ones, future_x - design.xmean])
        ols_cov = coef_covariance(design, 0.0, design.sigma_w2)
        plain = np.sqrt(design.sigma_w2 / future_n + np.einsum("dj,jk,dk->d", rows, ols_cov, rows))
        naive.append(_true_arl(fit, h_known, plain, future_n, future_x))
    calibrated, naive = np.array(calibrated), np.array(naive)
    share = np.mean(calibrated >= target)
    assert abs(share - guarantee) <= 0.064, share
    assert np.mean(naive >= target) < 0.05 and np.median(naive) < 50.0


def test_estimation_error_alone_shortens_the_run_length():
    # With the right day scale but h chosen as if the estimates were exact, most charts fall short
    # of the target: the reason for calibrating (Gandy & Kvaløy 2013, §1, from memory;
    # README, "What the figures mean": the bias chart's limit).
    rng = np.random.default_rng(5)
    future_n = rng.poisson(80, 3000).astype(float)
    future_x = rng.uniform(14, 26, 3000)
    h_known = solve_h(0.5, 1000.0)
    arls = []
    for _ in range(60):
        fit, _, design = _window(rng)
        scale = 1.0 / standardize_days(np.ones(3000), future_n, future_x, design)
        arls.append(_true_arl(fit, h_known, scale, future_n, future_x))
    assert np.median(arls) < 800.0 and np.mean(np.array(arls) >= 1000.0) < 0.45


def test_calibration_is_deterministic_and_reports_its_terms():
    _, _, design = _window(np.random.default_rng(1))
    one = calibrate_h(design, draws=100, seed=9)
    two = calibrate_h(design, draws=100, seed=9)
    other = calibrate_h(design, draws=100, seed=10)
    assert one.h == two.h and one.h != other.h
    assert one.h == pytest.approx(np.quantile(one.h_draws, 0.9))
    assert one.arl_known == pytest.approx(cusum_arl(0.5, one.h), rel=1e-12)
    assert one.arl_known > one.target_arl
    assert (one.k, one.target_arl, one.guarantee, one.draws, one.seed) == (0.5, 1000.0, 0.9, 100, 9)


def test_small_window_is_not_calibrated():
    rng = np.random.default_rng(2)
    day = np.repeat([0, 1], 6)
    x = rng.uniform(10, 20, 12)
    _, _, design = _design_of(day, x, 3 + x + rng.normal(0, 1, 12))
    cal = calibrate_h(design)
    assert not cal.calibrated and "2 days" in cal.reason
    assert cal.h == cal.h_known == pytest.approx(solve_h(0.5, 1000.0))
    assert cal.draws == 0 and cal.h_draws.size == 0


def test_bad_calibration_arguments():
    _, _, design = _window(np.random.default_rng(1), days=10)
    with pytest.raises(ValueError):
        calibrate_h(design, guarantee=1.0)
    with pytest.raises(ValueError):
        calibrate_h(design, draws=0)


def test_zero_residual_variance_is_degenerate():
    day = np.repeat([0, 1, 2], 4)
    x = np.arange(12.0)
    days = DayMoments.from_rows(day, np.column_stack([x, 1 + 2 * x]))
    fit = fit_moments(days.total())
    with pytest.raises(DegenerateDataError, match="residual"):
        ChartDesign.from_fit(fit, days, day_effects_of_fit(days, fit.coef))


def test_a_frozen_limit_approaches_the_known_parameter_limit_as_its_days_grow():
    # Common practice, no source: with many days the estimates are nearly exact, so the
    # guaranteed limit tends to the known-parameter one (solve_h, checked against published
    # ARL tables in test_arl.py); with fewer days it must be wider, never narrower.
    from monitor.stats.calibration import frozen_limit, self_starting

    known = solve_h(0.5, 1000.0)
    limits = [frozen_limit(0.5, 1000.0, 0.95, n) for n in (20, 60, 200, 5000)]
    assert all(a > b for a, b in itertools.pairwise(limits))
    assert limits[-1] == pytest.approx(known, rel=0.05)
    assert limits[0] > known
    # a self-starting chart's limit is the known-parameter one (its Q values are exact)
    assert self_starting(0.5, 1000.0, 0.95, 60).h == pytest.approx(known, rel=1e-12)
