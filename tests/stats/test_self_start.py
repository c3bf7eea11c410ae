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
