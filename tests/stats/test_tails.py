"""The laws of ``monitor.stats.tails`` against scipy.stats (the reference library itself)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from monitor.stats import tails

X = np.array([-40.0, -6.5, -1.96, -0.3, 0.0, 0.4, 1.0, 2.5, 8.0, 39.0])
Q = np.array([1e-12, 1e-6, 0.001, 0.025, 0.3, 0.5, 0.8, 0.975, 0.999, 1 - 1e-9])
DF = [1, 2.5, 7, 30, 1000, 1e7]


def test_normal() -> None:
    np.testing.assert_allclose(tails.norm_cdf(X), stats.norm.cdf(X), rtol=1e-14, atol=0)
    np.testing.assert_allclose(tails.norm_sf(X), stats.norm.sf(X), rtol=1e-14, atol=0)
    np.testing.assert_allclose(tails.norm_ppf(Q), stats.norm.ppf(Q), rtol=1e-14)
    np.testing.assert_allclose(tails.norm_isf(Q), stats.norm.isf(Q), rtol=1e-14)


@pytest.mark.parametrize("df", DF)
def test_student_t(df: float) -> None:
    np.testing.assert_allclose(tails.t_cdf(X, df), stats.t.cdf(X, df), rtol=1e-12, atol=0)
    np.testing.assert_allclose(tails.t_sf(X, df), stats.t.sf(X, df), rtol=1e-12, atol=0)
    np.testing.assert_allclose(tails.t_ppf(Q, df), stats.t.ppf(Q, df), rtol=1e-12)


@pytest.mark.parametrize("df", DF[:-1])
def test_chi_square(df: float) -> None:
    x = np.abs(X) * df / 4
    np.testing.assert_allclose(tails.chi2_sf(x, df), stats.chi2.sf(x, df), rtol=1e-12, atol=0)
    np.testing.assert_allclose(tails.chi2_ppf(Q, df), stats.chi2.ppf(Q, df), rtol=1e-12)


@pytest.mark.parametrize("dfn, dfd", [(1, 3), (2, 57), (9, 9), (30, 4000)])
def test_f(dfn: float, dfd: float) -> None:
    x = np.abs(X) / 3
    np.testing.assert_allclose(tails.f_sf(x, dfn, dfd), stats.f.sf(x, dfn, dfd), rtol=1e-12,
                               atol=0)
    np.testing.assert_allclose(tails.f_cdf(x, dfn, dfd), stats.f.cdf(x, dfn, dfd), rtol=1e-12,
                               atol=0)


@pytest.mark.parametrize("n, p", [(0, 0.2), (1, 0.5), (12, 0.003), (400, 0.05), (30_000, 0.9)])
def test_binomial_upper_tail(n: int, p: float) -> None:
    for k in sorted({-3, -1, 0, 1, n // 3, n - 1, n, n + 5}):
        assert tails.binom_sf(k, n, p) == pytest.approx(float(stats.binom.sf(k, n, p)),
                                                        rel=1e-12, abs=1e-300)
