"""The law of interval misses under AR(1) day shocks."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from monitor.stats.misses import NODE_TAIL, MissLaw
from monitor.stats.persistent_misses import persistent_pvalues

LAW = MissLaw(tau2=2.25, sigma_w2=9.0, half_width=6.6)
ROWS = np.array([96, 104, 99, 91, 110, 101, 97, 88, 103, 100, 95, 107, 99, 102])


@pytest.mark.parametrize("misses", [40, 70, 100, 140])
def test_without_persistence_it_is_the_independent_day_law(misses: int) -> None:
    # phi = 0: the Markov chain's rows are the node weights, so the recursion is the exact
    # convolution of independent days (monitor.stats.misses, itself checked against scipy).
    assert persistent_pvalues(LAW, ROWS, misses, 0.0) == pytest.approx(
        LAW.pvalues(ROWS, misses), rel=1e-10)


def test_matches_a_monte_carlo_of_ar1_shocks() -> None:
    # Reference: direct simulation of the model (AR(1) shocks, binomial misses given the shock)
    # with numpy's generators and scipy.stats.norm; 400 000 windows, seed fixed.
    rng = np.random.default_rng(2)
    reps, phi = 400_000, 0.5
    a = np.empty((reps, len(ROWS)))
    a[:, 0] = rng.standard_normal(reps)
    for d in range(1, len(ROWS)):
        a[:, d] = phi * a[:, d - 1] + np.sqrt(1 - phi**2) * rng.standard_normal(reps)
    shock = np.sqrt(LAW.tau2) * a
    sw = np.sqrt(LAW.sigma_w2)
    p = stats.norm.sf((LAW.half_width - shock) / sw) + stats.norm.cdf((-LAW.half_width - shock)
                                                                       / sw)
    total = rng.binomial(ROWS[None, :], p).sum(axis=1)
    for m in (70, 100, 140):
        simulated = float((total >= m).mean())
        se = np.sqrt(simulated * (1 - simulated) / reps)
        assert persistent_pvalues(LAW, ROWS, m, phi)[0] == pytest.approx(simulated,
                                                                         abs=4 * se + 2e-5)
    # persistence widens the upper tail well beyond the independent-day law
    assert persistent_pvalues(LAW, ROWS, 140, phi)[0] > 5 * LAW.pvalues(ROWS, 140)[0]


@pytest.mark.parametrize("cells", [42, 402])
@pytest.mark.parametrize("n", [0, 1, 5, 37, 400, 30_000])
def test_a_days_capped_law_is_scipys_binomial(n: int, cells: int) -> None:
    # Reference: scipy.stats.binom pmf and sf (the per-day law is written with the special
    # functions behind them, for speed); nodes include the edges p = 0 and p = 1. Counts
    # beyond a node's Bernstein band are left at 0 by design: each is below NODE_TAIL (1e-22).
    from monitor.stats.persistent_misses import _capped_binomial

    p = np.array([0.0, 1e-6, 0.013, 0.05, 0.4, 0.97, 1.0])
    law = _capped_binomial(n, p, cells)
    k = np.arange(cells - 1)
    expected = np.concatenate([stats.binom.pmf(k[None, :], n, p[:, None]),
                               stats.binom.sf(cells - 2, n, p)[:, None]], axis=1)
    np.testing.assert_allclose(law, expected, rtol=1e-9, atol=NODE_TAIL)
    np.testing.assert_allclose(law.sum(axis=1), 1.0, rtol=1e-10)
    kept = law > 0
    np.testing.assert_allclose(law[kept], expected[kept], rtol=1e-9)


def test_the_days_bands_change_no_p_value(monkeypatch: pytest.MonkeyPatch) -> None:
    # 3 000 rows a day over 14 days: the bands cover a sixth of the cells. Widened to a node
    # tail of 1e-300 they would cover 60 %, so every cell is computed instead; the p-values
    # agree (the cells left out hold less than 1e-22 of a node's mass each).
    import monitor.stats.persistent_misses as pm

    law = MissLaw(tau2=4.0, sigma_w2=49.0, half_width=14.3)
    rows = np.random.default_rng(3).poisson(3000, 14)
    expected = law.miss_rate * rows.sum()
    cases = [(int(f * expected), phi) for f in (0.6, 1.0, 1.5) for phi in (0.3, 0.7)]
    banded = [persistent_pvalues(law, rows, m, phi) for m, phi in cases]
    monkeypatch.setattr(pm, "NODE_TAIL", 1e-300)
    for (m, phi), got in zip(cases, banded, strict=True):
        assert got == pytest.approx(persistent_pvalues(law, rows, m, phi), rel=1e-12, abs=1e-300)
