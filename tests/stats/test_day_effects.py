"""Between-day and within-day variance components of residuals."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm

from monitor.stats.day_effects import day_effects, day_effects_of_fit, day_residuals
from monitor.stats.moments import DayMoments
from monitor.stats.ols import fit_ols


def _groups(values, labels):
    frame = pd.DataFrame({"v": values, "g": labels})
    grouped = frame.groupby("g")["v"]
    counts = grouped.size().to_numpy()
    means = grouped.mean().to_numpy()
    ssw = grouped.apply(lambda s: ((s - s.mean()) ** 2).sum()).to_numpy()
    return counts, means, ssw


# statsmodels anova_lm on the one-way layout gives the between and within mean squares and F.
def test_mean_squares_and_f_match_statsmodels_anova_on_unbalanced_groups():
    rng = np.random.default_rng(4)
    sizes = rng.integers(3, 30, 25)
    labels = np.repeat(np.arange(25), sizes)
    values = rng.normal(0, 1.5, 25)[labels] + rng.normal(0, 4, len(labels))
    frame = pd.DataFrame({"v": values, "g": labels.astype(str)})
    table = anova_lm(smf.ols("v ~ C(g)", frame).fit())
    ours = day_effects(*_groups(values, labels))
    assert ours.ms_between == pytest.approx(table.loc["C(g)", "mean_sq"], rel=1e-10)
    assert ours.ms_within == pytest.approx(table.loc["Residual", "mean_sq"], rel=1e-10)
    assert ours.statistic == pytest.approx(table.loc["C(g)", "F"], rel=1e-10)
    assert ours.pvalue == pytest.approx(table.loc["C(g)", "PR(>F)"], rel=1e-8)
    # unbalanced effective group size (Searle, Casella & McCulloch 1992, eq. 3.5.13)
    n = sizes.astype(float)
    assert ours.n0 == pytest.approx((n.sum() - (n**2).sum() / n.sum()) / 24)


# For balanced data the REML estimates equal the ANOVA estimates when these are positive
# (Searle, Casella & McCulloch 1992, §6.8); statsmodels MixedLM (REML) is the reference.
def test_balanced_estimates_equal_statsmodels_mixedlm_reml():
    rng = np.random.default_rng(9)
    groups, per = 40, 12
    labels = np.repeat(np.arange(groups), per)
    values = 5 + rng.normal(0, 2.0, groups)[labels] + rng.normal(0, 3.0, groups * per)
    ours = day_effects(*_groups(values, labels))
    mixed = sm.MixedLM(values, np.ones((len(values), 1)), groups=labels).fit(reml=True)
    assert ours.tau2 == pytest.approx(float(np.asarray(mixed.cov_re)[0, 0]), rel=1e-4)
    assert ours.sigma_w2 == pytest.approx(mixed.scale, rel=1e-4)


# The ANOVA estimator (MS_between - MS_within) / n0 is negative when the day means vary less than
# the rows would make them; it is truncated at zero (Searle, Casella & McCulloch 1992, §3.5,
# from memory). The day means are pulled 90 % of the way to the grand mean, so that case is
# certain; statsmodels anova_lm gives the F test that must not reject.
def test_negative_estimate_is_truncated_at_zero_and_test_does_not_reject():
    rng = np.random.default_rng(1)
    labels = np.repeat(np.arange(30), 10)
    values = rng.normal(0, 1, 300)
    means = pd.Series(values).groupby(labels).transform("mean").to_numpy()
    values = values - 0.9 * (means - values.mean())
    ours = day_effects(*_groups(values, labels))
    assert ours.ms_between < ours.ms_within / 10
    assert ours.tau2 == 0.0
    frame = pd.DataFrame({"v": values, "g": labels.astype(str)})
    table = anova_lm(smf.ols("v ~ C(g)", frame).fit())
    assert ours.statistic == pytest.approx(table.loc["C(g)", "F"], rel=1e-10)
    assert ours.pvalue == pytest.approx(table.loc["C(g)", "PR(>F)"], rel=1e-8)
    assert ours.pvalue > 0.99


# Recovery by simulation (common practice, no source): the estimators are unbiased before
# truncation; average over replicates lands within 4 Monte Carlo standard errors.
def test_components_are_recovered_from_regression_residuals_via_day_statistics():
    rng = np.random.default_rng(77)
    tau, sigma = 2.5, 6.0
    tau2s, sw2s = [], []
    for _ in range(60):
        counts = rng.poisson(80, 60)
        labels = np.repeat(np.arange(60), counts)
        x = rng.uniform(8, 34, len(labels))
        y = 12 + 2.1 * x + rng.normal(0, tau, 60)[labels] + rng.normal(0, sigma, len(labels))
        fit = fit_ols(x, y)
        table = DayMoments.from_rows(labels, np.column_stack([x, y]))
        est = day_effects_of_fit(table, fit.coef)
        tau2s.append(est.tau2)
        sw2s.append(est.sigma_w2)
    tau2s, sw2s = np.array(tau2s), np.array(sw2s)
    assert abs(tau2s.mean() - tau**2) < 4 * tau2s.std(ddof=1) / np.sqrt(len(tau2s))
    assert abs(sw2s.mean() - sigma**2) < 4 * sw2s.std(ddof=1) / np.sqrt(len(sw2s))


def test_day_residuals_from_statistics_equal_raw_residuals():
    rng = np.random.default_rng(3)
    labels = rng.integers(0, 7, 300)
    x = rng.uniform(0, 30, (300, 2))
    y = 4 + x @ [1.5, -0.5] + rng.normal(0, 2, 300)
    fit = fit_ols(x, y)
    resid = y - fit.predict(x)
    table = DayMoments.from_rows(labels, np.column_stack([x, y]))
    ours = day_residuals(table, fit.coef)
    counts, means, ssw = _groups(resid, labels)
    assert np.array_equal(ours.counts, counts)
    assert np.allclose(ours.means, means, atol=1e-10)
    assert np.allclose(ours.within_ss, ssw, rtol=1e-9)


def test_net_of_rhythm_takes_out_the_between_weekday_sum_of_squares_of_statsmodels():
    # Reference: statsmodels anova_lm of the Nile flows (shipped with statsmodels) grouped by
    # position modulo 7 as "weekdays": the rhythm's share Σ (G_w/G) o_w² is the between-group
    # sum of squares over G. With the day variance of the layout (tau² + sigma_w²/n0) the net
    # day-shock variance loses exactly SS_between/G - (W-1)/G · day variance (the noise part of
    # SS_between's expectation, one-way ANOVA), and the chart keeps the offsets' own error,
    # (W/G)(tau²_net + sigma_w²/n0).
    from monitor.stats.day_effects import net_of_rhythm
    from monitor.stats.window_summary import DayEffects

    weekday = np.arange(100) % 7
    # a rhythm laid on the flows: "Mondays" +150, "Saturdays" -100
    nile = sm.datasets.nile.load_pandas().data["volume"].to_numpy() + \
        150.0 * (weekday == 0) - 100.0 * (weekday == 5)
    frame = pd.DataFrame({"v": nile, "w": weekday})
    ss_between = anova_lm(smf.ols("v ~ C(w)", data=frame).fit())["sum_sq"]["C(w)"]
    offsets = [nile[weekday == w].mean() - nile.mean() for w in range(7)]
    counts = [int((weekday == w).sum()) for w in range(7)]
    g, w = len(nile), 7
    effects = DayEffects(tau2=float(nile.var(ddof=1)), sigma_w2=400.0, n_days=g, n_rows=g * 4,
                         n0=4.0, ms_between=0.0, ms_within=0.0, statistic=0.0, pvalue=0.0)
    day_var = effects.tau2 + effects.sigma_w2 / effects.n0
    explained = ss_between / g - (w - 1) / g * day_var
    assert explained > 0
    net = effects.tau2 - explained
    expected = net + (w / g) * (net + effects.sigma_w2 / effects.n0)
    assert net_of_rhythm(effects, offsets, counts).tau2 == pytest.approx(expected, rel=1e-10)
    # offsets of zero take nothing out; the chart still carries their estimation error
    flat = net_of_rhythm(effects, [0.0] * 7, counts).tau2
    assert flat == pytest.approx(effects.tau2 + (w / g) * day_var, rel=1e-12)
