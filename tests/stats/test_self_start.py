"""The self-starting level against outside references (statsmodels, scipy, Quesenberry 1991)."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from monitor.stats.self_start import learned, level_of, q_value


def test_running_level_is_the_sample_mean_and_sum_of_squares() -> None:
    # numpy as the reference; adding one by one agrees with taking them all at once
    values = np.array([3.1, -0.4, 2.2, 5.9, 1.0, -2.5, 0.3, np.nan])
    one_by_one = level_of([])
    for v in values[:-1]:
        one_by_one = learned(one_by_one, float(v))
    finite = values[:-1]
    for level in (one_by_one, level_of(values)):
        assert level.n == len(finite)
        assert level.mean[0] == pytest.approx(finite.mean(), rel=1e-12)
        assert level.comoment[0, 0] == pytest.approx(((finite - finite.mean()) ** 2).sum(),
                                                      rel=1e-12)


def test_q_is_the_studentized_prediction_error_through_its_t_law() -> None:
    # Reference: statsmodels OLS on a constant, get_prediction(...).summary_frame: the new
    # value's standardized distance from the mean is (y - mean) / se_obs, se_obs = s sqrt(1+1/n),
    # and Q = Φ⁻¹(F_t(n-1)) of it (Quesenberry 1991, eq. for Q with unknown mean and variance).
    known = np.array([2.0, 4.5, 3.3, 1.8, 5.2, 2.9])
    new = 7.4
    fit = sm.OLS(known, np.ones((len(known), 1))).fit()
    frame = fit.get_prediction(np.ones((1, 1))).summary_frame()
    t = (new - frame["mean"].iloc[0]) / frame["obs_ci_upper"].sub(frame["mean"]).iloc[0] * \
        stats.t.ppf(0.975, len(known) - 1)
    expected = stats.norm.ppf(stats.t.cdf(t, len(known) - 1))
    assert q_value(level_of(known), new) == pytest.approx(expected, rel=1e-10)
    # a far-out value keeps its digits (the tail on its own side)
    assert np.isfinite(q_value(level_of(known), 1e4))
    assert q_value(level_of(known), -1e80) == -37.5  # past any tail a double can hold


def test_q_values_of_normal_data_are_standard_normal_from_the_first_day() -> None:
    # Quesenberry (1991), Theorem 1: for independent normal values with unknown mean and
    # variance, the Q statistics from the third value on are independent standard normal.
    # Checked on 400 sequences of 25 values (seed fixed) with scipy's Kolmogorov–Smirnov test of
    # each position's 400 values and the lag-1 correlation within sequences.
    rng = np.random.default_rng(20)
    data = rng.normal(50.0, 7.0, (400, 25))
    qs = np.empty((400, 20))
    for i, row in enumerate(data):
        level = level_of(row[:5])
        for j, v in enumerate(row[5:]):
            qs[i, j] = q_value(level, float(v))
            level = learned(level, float(v))
    for j in (0, 19):
        assert stats.kstest(qs[:, j], "norm").pvalue > 0.01
    lag1 = np.corrcoef(qs[:, :-1].ravel(), qs[:, 1:].ravel())[0, 1]
    assert abs(lag1) < 4 / np.sqrt(qs.size)


def _days(rng: np.random.Generator, days: int, rows: int, tau: float, sigma: float
          ) -> tuple[np.ndarray, np.ndarray]:
    """Residuals of ``days`` days of ``rows`` rows sharing a day shock (one-way random effects)."""
    shocks = tau * rng.standard_normal(days)
    values = shocks[:, None] + sigma * rng.standard_normal((days, rows))
    return values, np.repeat(np.arange(days), rows)


def test_learned_spread_is_the_anova_estimate_of_all_days_with_the_fit_within_variance() -> None:
    # Reference: statsmodels' one-way ANOVA (anova_lm of OLS on the day as a factor) over the
    # fit days and the learned days together. With equal rows per day the ANOVA estimate is
    # tau² = (MSB - MSW)/n (Searle, Casella & McCulloch 1992, §3.5); the learned estimate keeps
    # the fit window's MSW, so it must equal (MSB_all - MSW_fit)/n exactly.
    import pandas as pd

    from monitor.stats.day_effects import day_effects
    from monitor.stats.self_start import learned_effects

    rng = np.random.default_rng(7)
    fit, learned_days, rows = 14, 26, 40
    values, day = _days(rng, fit + learned_days, rows, tau=1.5, sigma=3.0)
    means = values.mean(axis=1)
    within = ((values - means[:, None]) ** 2).sum(axis=1)
    effects = day_effects(np.full(fit, rows), means[:fit], within[:fit])
    base = level_of(means[:fit])
    level = level_of([])
    for m in means[fit:]:
        level = learned(level, float(m))
    new = learned_effects(effects, base, level)

    frame = pd.DataFrame({"r": values.ravel(), "day": day.astype(str)})
    table = sm.stats.anova_lm(sm.OLS.from_formula("r ~ C(day)", frame).fit())
    msb = table.loc["C(day)", "mean_sq"]
    assert new.tau2 == pytest.approx((msb - effects.sigma_w2) / rows, rel=1e-9)
    assert new.sigma_w2 == effects.sigma_w2
    assert (new.n_days, new.n_rows) == (fit + learned_days, (fit + learned_days) * rows)
    # nothing learned: the fit window's own estimate, unchanged
    assert learned_effects(effects, base, level_of([])) is effects


def test_learned_spread_holds_the_guarantee_and_comes_closer_to_the_truth() -> None:
    # The bounds of monitor.stats.misses.spread_scales must hold for at least a share g of the
    # windows (their definition) also when the spread is re-estimated with learned days:
    # P(true total spread <= wide x estimate) >= g. Checked by simulation, 1500 windows of 14
    # fit days and 26 learned days, 60 rows a day, day shocks a third of the total variance; 4
    # binomial sd of slack. The learned estimate must also be closer to the truth (its log
    # error's sd at most 3/4 of the fit window's; sqrt(14/40) = 0.59 in theory).
    from monitor.stats.day_effects import day_effects
    from monitor.stats.misses import spread_scales
    from monitor.stats.self_start import learned_effects

    rng = np.random.default_rng(11)
    fit, more, rows, tau, sigma, g = 14, 26, 60, 2.0, np.sqrt(8.0), 0.95
    truth = np.hypot(tau, sigma)
    runs = 1500
    held = {"fit": 0, "learned": 0}
    errors: dict[str, list[float]] = {"fit": [], "learned": []}
    for _ in range(runs):
        values, _ = _days(rng, fit + more, rows, tau, sigma)
        means = values.mean(axis=1)
        within = ((values - means[:, None]) ** 2).sum(axis=1)
        effects = day_effects(np.full(fit, rows), means[:fit], within[:fit])
        new = learned_effects(effects, level_of(means[:fit]), level_of(means[fit:]))
        for name, e in (("fit", effects), ("learned", new)):
            estimate = np.sqrt(e.tau2 + e.sigma_w2)
            held[name] += truth <= spread_scales(e, g)[0] * estimate
            errors[name].append(float(np.log(estimate / truth)))
    slack = 4 * np.sqrt(g * (1 - g) / runs)
    assert held["learned"] / runs >= g - slack
    assert held["fit"] / runs >= g - slack
    assert np.std(errors["learned"]) < 0.75 * np.std(errors["fit"])
