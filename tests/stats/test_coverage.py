"""Coverage: Wilson interval, one-sided tests, and the quasi-binomial dispersion factor."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.proportion import proportion_confint

from monitor.stats.coverage import coverage_test, miss_dispersion, wilson_interval


# statsmodels proportion_confint(method="wilson") as the reference library.
@pytest.mark.parametrize("covered,n", [(0, 10), (3, 10), (71, 100), (133, 140), (140, 140)])
@pytest.mark.parametrize("level", [0.90, 0.95])
def test_wilson_interval_matches_statsmodels(covered, n, level):
    ref = proportion_confint(covered, n, alpha=1 - level, method="wilson")
    assert wilson_interval(covered, n, level) == pytest.approx(ref, rel=1e-12, abs=1e-15)


# scipy.stats.binomtest as the reference: with dispersion 1 our tails are the exact binomial.
@given(n=st.integers(1, 400), data=st.data(), target=st.sampled_from([0.8, 0.9, 0.95, 0.99]))
def test_one_sided_tests_equal_scipy_binomtest_when_not_overdispersed(n, data, target):
    covered = data.draw(st.integers(0, n))
    ours = coverage_test(covered, n, target)
    less = stats.binomtest(covered, n, target, alternative="less").pvalue
    greater = stats.binomtest(covered, n, target, alternative="greater").pvalue
    assert ours.pvalue_low == pytest.approx(less, rel=1e-9, abs=1e-300)
    assert ours.pvalue_high == pytest.approx(greater, rel=1e-9, abs=1e-300)


def test_dispersion_weakens_the_evidence_as_it_should():
    plain = coverage_test(120, 140, 0.95)
    inflated = coverage_test(120, 140, 0.95, dispersion=2.5)
    assert inflated.pvalue_low > plain.pvalue_low
    assert inflated.wilson_high - inflated.wilson_low > plain.wilson_high - plain.wilson_low
    assert inflated.coverage == plain.coverage


# McCullagh & Nelder (1989) §4.5: the quasi-binomial scale is Pearson X² / residual df;
# statsmodels GLM (Binomial, proportions with var_weights = rows) fit(scale="X2") computes the
# same for an intercept-only model, as does its pearson_chi2 / df_resid.
def test_dispersion_equals_statsmodels_glm_pearson_scale():
    rng = np.random.default_rng(8)
    rows = rng.integers(40, 120, 50)
    rate = np.clip(0.05 + rng.normal(0, 0.03, 50), 0.001, 0.5)
    misses = rng.binomial(rows, rate)
    glm = sm.GLM(misses / rows, np.ones((50, 1)), family=sm.families.Binomial(),
                 var_weights=rows).fit(scale="X2")
    assert glm.scale > 1
    assert miss_dispersion(rows, misses) == pytest.approx(glm.scale, rel=1e-8)
    assert miss_dispersion(rows, misses) == pytest.approx(glm.pearson_chi2 / glm.df_resid)


def test_dispersion_is_floored_at_one():
    rows = np.full(30, 100)
    misses = np.full(30, 5)  # under-dispersed: identical every day
    assert miss_dispersion(rows, misses) == 1.0


# Calibration with day effects (common practice, no source): daily shocks make misses cluster;
# the plain binomial test then cries wolf, the quasi-binomial one keeps its size. Seeded.
def test_quasi_binomial_test_keeps_its_size_with_day_effects():
    rng = np.random.default_rng(31)
    tau, sigma, rows_per_day, days = 3.0, 6.0, 80, 14
    half = 1.96 * np.hypot(tau, sigma)  # the interval promises 95 % marginally

    def window(n_days):
        shocks = rng.normal(0, tau, n_days)
        noise = rng.normal(0, sigma, (n_days, rows_per_day))
        return (np.abs(shocks[:, None] + noise) <= half).sum(axis=1)

    training = window(60)
    phi = miss_dispersion(np.full(60, rows_per_day), rows_per_day - training)
    assert phi > 1.5
    plain = quasi = 0
    reps = 2000
    for _ in range(reps):
        covered = int(window(days).sum())
        n = days * rows_per_day
        plain += coverage_test(covered, n, 0.95).pvalue_low < 0.01
        quasi += coverage_test(covered, n, 0.95, dispersion=phi).pvalue_low < 0.01
    assert plain / reps > 0.03  # more than 3x the nominal 1 %
    assert quasi / reps < 0.025


def test_empty_window_gives_nan_not_an_error():
    result = coverage_test(0, 0, 0.95)
    assert np.isnan(result.pvalue_low) and np.isnan(result.coverage)
