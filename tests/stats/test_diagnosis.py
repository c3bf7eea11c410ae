"""The fit window's diagnosis against outside references (statsmodels, scipy, open datasets)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import acorr_ljungbox, het_breuschpagan

from monitor.stats.diagnosis import (
    day_spread,
    diagnose,
    koenker_breusch_pagan,
    ljung_box,
    robust_spread_test,
    weekday_anova,
)
from monitor.stats.window_summary import MAD_TO_SD


def test_ljung_box_matches_statsmodels_on_the_nile_series() -> None:
    # Reference: statsmodels acorr_ljungbox on the Nile flow series shipped with statsmodels
    # (Cobb 1978; Durbin & Koopman 2001), 10 lags.
    nile = sm.datasets.nile.load_pandas().data["volume"].to_numpy(dtype=float)
    r, test = ljung_box(nile, 10)
    ref = acorr_ljungbox(nile, lags=[10], return_df=True)
    assert test.statistic == pytest.approx(float(ref["lb_stat"].iloc[0]), rel=1e-12)
    assert test.pvalue == pytest.approx(float(ref["lb_pvalue"].iloc[0]), rel=1e-9)
    acf = sm.tsa.acf(nile, nlags=10, fft=False)
    np.testing.assert_allclose(r, acf[1:], rtol=1e-12)


def test_weekday_anova_matches_scipy_f_oneway() -> None:
    # Reference: scipy.stats.f_oneway (one-way ANOVA).
    rng = np.random.default_rng(7)
    weekdays = np.arange(60) % 6  # six working days
    u = rng.normal(size=60) + 0.4 * (weekdays == 0)
    test = weekday_anova(u, weekdays)
    ref = stats.f_oneway(*(u[weekdays == w] for w in range(6)))
    assert test.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert test.pvalue == pytest.approx(ref.pvalue, rel=1e-9)
    assert test.df == (5.0, 54.0)


def test_koenker_breusch_pagan_matches_statsmodels_on_longley() -> None:
    # Reference: statsmodels het_breuschpagan(robust=True), Koenker's studentized form, on the
    # Longley data (Longley 1967, shipped with statsmodels): OLS of TOTEMP on GNP and POP.
    data = sm.datasets.longley.load_pandas().data
    x = data[["GNP", "POP"]].to_numpy()
    y = data["TOTEMP"].to_numpy()
    exog = sm.add_constant(x)
    resid = sm.OLS(y, exog).fit().resid
    test = koenker_breusch_pagan(resid, x)
    lm, lm_p, _, _ = het_breuschpagan(resid, exog, robust=True)
    assert test.statistic == pytest.approx(lm, rel=1e-9)
    assert test.pvalue == pytest.approx(lm_p, rel=1e-9)


def test_robust_spread_test_on_one_new_day_is_the_prediction_interval_of_statsmodels() -> None:
    # Reference: statsmodels OLS on a constant, get_prediction(...).summary_frame(alpha=0.10):
    # a new value at the upper end of the 90 % prediction interval has one-sided p = 0.05.
    rng = np.random.default_rng(3)
    ref = rng.normal(0.0, 0.2, 60)
    frame = sm.OLS(ref, np.ones(60)).fit().get_prediction(np.ones((1, 1))).summary_frame(
        alpha=0.10)
    upper = float(frame["obs_ci_upper"].iloc[0])
    test = robust_spread_test([upper], ref)
    assert test is not None
    assert test.pvalue == pytest.approx(0.05, rel=1e-9)
    assert test.df == 59
    assert test.ratio == pytest.approx(math.exp(upper - ref.mean()), rel=1e-12)


def test_robust_spread_test_holds_its_level_on_recent_windows_of_any_length() -> None:
    # Seeded simulation of the null (normal day values), 4000 pairs per window length; the
    # rejection rate at 1 % stays within 3 binomial sd of 1 %.
    rng = np.random.default_rng(17)
    for days in (2, 7, 28):
        hits = sum(robust_spread_test(rng.normal(size=days), rng.normal(size=60)).pvalue < 0.01
                   for _ in range(4000))
        assert abs(hits / 4000 - 0.01) < 3 * math.sqrt(0.01 * 0.99 / 4000)


def test_day_spread_is_the_scaled_log_mean_absolute_deviation_from_the_median() -> None:
    # Brown & Forsythe (1974): absolute deviations from the group median.
    r = np.array([1.0, 2.0, 4.0, 10.0])  # median 3; deviations 2, 1, 1, 7 -> mean 2.75
    assert day_spread(r) == pytest.approx(math.log(2.75 * math.sqrt(4 / 3)), rel=1e-14)
    assert day_spread(np.array([5.0])) is None


def test_mad_constant_is_the_normal_quartile() -> None:
    # 1 / Φ⁻¹(3/4) (Hampel 1974; scipy.stats.norm.ppf).
    assert pytest.approx(1 / stats.norm.ppf(0.75), rel=1e-14) == MAD_TO_SD


def _window(rng: np.random.Generator, phi: float, days: int = 120, rows: int = 80,
            tails: float | None = None) -> tuple[np.ndarray, ...]:
    a = np.zeros(days)
    a[0] = rng.normal()
    for d in range(1, days):
        a[d] = phi * a[d - 1] + math.sqrt(1 - phi**2) * rng.normal()
    idx = np.repeat(np.arange(days), rows)
    w = rng.standard_t(tails, idx.size) if tails else rng.normal(size=idx.size)
    x = rng.uniform(4, 30, idx.size)
    return a[idx] * 0.8 + w * 1.5, idx, np.arange(days) % 7, x


def test_persistent_day_shocks_are_found_and_independent_ones_are_not() -> None:
    # Seeded simulation (invented data, checked against the AR(1) parameter it was drawn with).
    rng = np.random.default_rng(11)
    r, idx, wd, x = _window(rng, 0.6)
    found = diagnose(r, idx, wd, x, tau2=0.64, sigma_w2=2.25, covered_share=0.95)
    assert found.persistence == pytest.approx(0.6, abs=0.2)
    assert found.persistence_test.pvalue < 1e-4
    assert found.chart_persistence(0.05) == found.persistence
    r, idx, wd, x = _window(rng, 0.0)
    calm = diagnose(r, idx, wd, x, tau2=0.64, sigma_w2=2.25, covered_share=0.95)
    assert abs(calm.persistence) < 0.3
    assert calm.tail_share < 1e-3
    assert calm.robust_sd == pytest.approx(1.5, rel=0.05)


def test_heavy_tails_show_in_the_tail_share() -> None:
    rng = np.random.default_rng(5)
    r, idx, wd, x = _window(rng, 0.0, tails=3)
    found = diagnose(r, idx, wd, x, tau2=0.64, sigma_w2=2.25 * 3, covered_share=0.95)
    # t(3) puts 2 P(T > 4 / (MAD_t3 · 1.4826)) of rows beyond 4 robust sd: far above 6.3e-5
    assert found.tail_share > 10 * 2 * stats.norm.sf(4)
    assert found.tail_pvalue < 1e-6
    assert found.robust_sd < found.classical_sd
