"""OLS by QR and from merged day statistics, against NIST StRD certified values and statsmodels."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor.errors import DegenerateDataError
from monitor.stats.moments import DayMoments, Moments
from monitor.stats.ols import fit_moments, fit_ols
from tests.stats.reference_data import (
    LONGLEY,
    LONGLEY_B,
    LONGLEY_NAMES,
    LONGLEY_R2,
    LONGLEY_RESID_SD,
    LONGLEY_RSS,
    LONGLEY_SD,
    NORRIS_B,
    NORRIS_R2,
    NORRIS_RESID_SD,
    NORRIS_SD,
    NORRIS_X,
    NORRIS_Y,
)

LONGLEY_ARR = np.array(LONGLEY)
LX, LY = LONGLEY_ARR[:, 1:], LONGLEY_ARR[:, 0]


def rel(a, b):
    return np.max(np.abs(np.asarray(a) - np.asarray(b)) / np.abs(np.asarray(b)))


# NIST StRD Longley (higher difficulty): certified to 15 digits. The QR path on centred,
# scaled predictors reaches about 1e-13; we assert 1e-10 (the issue asks for 1e-8).
def test_longley_qr_matches_nist_certified_values():
    fit = fit_ols(LX, LY, LONGLEY_NAMES)
    assert rel(fit.coef, LONGLEY_B) < 1e-10
    assert rel(fit.std_errors, LONGLEY_SD) < 1e-10
    assert fit.s == pytest.approx(LONGLEY_RESID_SD, rel=1e-10)
    assert fit.r_squared == pytest.approx(LONGLEY_R2, rel=1e-12)
    assert fit.rss == pytest.approx(LONGLEY_RSS, rel=1e-10)
    assert fit.dof == 9
    assert fit.terms == ("intercept", *LONGLEY_NAMES)


# NIST StRD Norris (lower difficulty, y = B0 + B1 x).
def test_norris_qr_matches_nist_certified_values():
    fit = fit_ols(NORRIS_X, NORRIS_Y, ["x"])
    assert rel(fit.coef, NORRIS_B) < 1e-12
    assert rel(fit.std_errors, NORRIS_SD) < 1e-12
    assert fit.s == pytest.approx(NORRIS_RESID_SD, rel=1e-12)
    assert fit.r_squared == pytest.approx(NORRIS_R2, rel=1e-14)


# NIST Longley split into 4 blocks of 4 "days", merged by Chan-Golub-LeVeque: the co-moment
# path squares the (centred, scaled) condition number (~1.2e4) and still keeps ~12 digits.
# The issue asks for at least 6 significant digits; we assert 1e-9 relative.
def test_longley_from_four_merged_blocks_keeps_nine_digits():
    days = np.repeat(np.arange(4), 4)
    table = DayMoments.from_rows(days, np.column_stack([LX, LY]))
    merged = Moments.merge_all((table.day(i) for i in range(4)), dim=7)
    fit = fit_moments(merged, LONGLEY_NAMES)
    assert rel(fit.coef, LONGLEY_B) < 1e-9
    assert rel(fit.std_errors, LONGLEY_SD) < 1e-9
    assert fit.s == pytest.approx(LONGLEY_RESID_SD, rel=1e-9)
    assert fit.r_squared == pytest.approx(LONGLEY_R2, rel=1e-12)


# From statistics the residual SS is a difference (Syy - Sxy b), which loses about
# log10(1 / (1 - R²)) = 5 digits on Norris (R² = 0.999994): ~2e-11 reached, 1e-9 asserted.
def test_norris_from_merged_days_matches_nist():
    days = np.arange(len(NORRIS_X)) % 5
    table = DayMoments.from_rows(days, np.column_stack([NORRIS_X, NORRIS_Y]))
    fit = fit_moments(table.total(), ["x"])
    assert rel(fit.coef, NORRIS_B) < 1e-11
    assert rel(fit.std_errors, NORRIS_SD) < 1e-9
    assert fit.s == pytest.approx(NORRIS_RESID_SD, rel=1e-9)


def _generated(seed, n=400, k=3):
    rng = np.random.default_rng(seed)
    x = rng.normal([20.0, 5.0, 300.0][:k], [6.0, 1.0, 40.0][:k], size=(n, k))
    y = 12.0 + x @ np.array([2.1, -3.0, 0.05][:k]) + rng.normal(0, 4.0, n)
    return x, y


# statsmodels OLS as the reference library: every reported figure, to 1e-10 relative.
@pytest.mark.parametrize("k", [1, 2, 3])
def test_qr_fit_matches_statsmodels(k):
    x, y = _generated(k, k=k)
    ours = fit_ols(x, y)
    ref = sm.OLS(y, sm.add_constant(x)).fit()
    assert rel(ours.coef, ref.params) < 1e-10
    assert rel(ours.std_errors, ref.bse) < 1e-10
    assert rel(ours.tvalues, ref.tvalues) < 1e-10
    assert rel(ours.pvalues, ref.pvalues) < 1e-8
    assert rel(ours.confidence_interval(0.9), ref.conf_int(alpha=0.1)) < 1e-10
    assert rel(ours.cov, ref.cov_params()) < 1e-10
    assert ours.r_squared == pytest.approx(ref.rsquared, rel=1e-12)
    assert ours.adj_r_squared == pytest.approx(ref.rsquared_adj, rel=1e-12)
    assert ours.s == pytest.approx(np.sqrt(ref.scale), rel=1e-12)
    assert ours.dof == ref.df_resid
    assert ours.condition_number == pytest.approx(ref.condition_number, rel=1e-8)
    assert np.allclose(ours.x_min, x.min(axis=0)) and np.allclose(ours.x_max, x.max(axis=0))


# The tolerance for well-conditioned data: merged day statistics equal QR to 1e-9.
@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), groups=st.integers(1, 30), k=st.integers(1, 3))
def test_fit_from_day_statistics_equals_qr_fit(seed, groups, k):
    x, y = _generated(seed, n=200, k=k)
    days = np.random.default_rng(seed).integers(0, groups, len(y))
    table = DayMoments.from_rows(days, np.column_stack([x, y]))
    a, b = fit_ols(x, y), fit_moments(table.total())
    assert rel(b.coef, a.coef) < 1e-9
    assert rel(b.std_errors, a.std_errors) < 1e-9
    assert b.rss == pytest.approx(a.rss, rel=1e-9)
    assert b.condition_number == pytest.approx(a.condition_number, rel=1e-6)
    assert np.array_equal(b.x_min, a.x_min) and np.array_equal(b.x_max, a.x_max)


def test_leverage_equals_hat_diagonal_from_statsmodels():
    x, y = _generated(7, n=60, k=2)
    fit = fit_ols(x, y)
    hat = sm.OLS(y, sm.add_constant(x)).fit().get_influence().hat_matrix_diag
    assert rel(fit.leverage(x), hat) < 1e-10


class TestDegenerateData:
    def test_too_few_rows_names_the_requirement(self):
        with pytest.raises(DegenerateDataError, match="needs more than 2 rows"):
            fit_ols([1.0, 2.0], [3.0, 4.0])

    def test_constant_predictor_is_named(self):
        with pytest.raises(DegenerateDataError, match=r"'pallets' is constant .* 12"):
            fit_ols(np.full(10, 12.0), np.arange(10.0), ["pallets"])

    def test_collinear_predictors_are_named(self):
        a = np.arange(20.0)
        x = np.column_stack([a, 2 * a + 1])
        with pytest.raises(DegenerateDataError, match="linear combination"):
            fit_ols(x, a + np.sin(a), ["pallets", "weight"])

    def test_constant_predictor_from_moments(self):
        m = Moments.of(np.column_stack([np.full(10, 3.0), np.arange(10.0)]))
        with pytest.raises(DegenerateDataError, match="'x1' is constant"):
            fit_moments(m)

    def test_collinear_predictors_from_moments(self):
        a = np.arange(20.0)
        m = Moments.of(np.column_stack([a, 3 * a - 2, a**0.5]))
        with pytest.raises(DegenerateDataError, match="linear combination"):
            fit_moments(m)

    def test_non_finite_values_are_refused(self):
        with pytest.raises(DegenerateDataError, match="finite"):
            fit_ols([1.0, 2.0, np.nan, 4.0], [1.0, 2.0, 3.0, 5.0])
