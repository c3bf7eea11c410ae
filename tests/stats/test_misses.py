"""The law of a window's interval misses under day effects, and why the decision uses it."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, special, stats

from monitor.stats import misses
from monitor.stats.coverage import coverage_test, miss_dispersion
from monitor.stats.day_effects import day_effects
from monitor.stats.misses import (
    DIRECT_MAX_ROWS,
    SHOCK_NODES,
    GuardedMissLaw,
    MissLaw,
    chi2_scales,
    spread_scales,
)

TAU, SIGMA, ROWS = 2.5, 5.0, 78
HALF = 1.96 * np.hypot(TAU, SIGMA)


# Without day effects a window's misses are binomial: scipy.stats.binom as the reference.
@pytest.mark.parametrize("misses", [0, 20, 40, 60, 90])
def test_without_day_effects_the_law_is_binomial(misses: int) -> None:
    law = MissLaw(0.0, SIGMA**2, HALF)
    p = 2 * stats.norm.sf(HALF / SIGMA)
    rows = [70, 80, 0, 75]
    total = sum(rows)
    upper, lower = law.pvalues(rows, misses)
    assert upper == pytest.approx(stats.binom.sf(misses - 1, total, p), rel=1e-9, abs=1e-15)
    assert lower == pytest.approx(stats.binom.cdf(misses, total, p), rel=1e-9, abs=1e-15)


# The marginal miss rate against direct numerical integration (scipy.integrate.quad) of
# P(|a + w| > c) over a ~ N(0, tau²).
def test_miss_rate_equals_direct_integration() -> None:
    law = MissLaw(TAU**2, SIGMA**2, HALF)

    def miss(a: float) -> float:
        return (stats.norm.sf((HALF - a) / SIGMA) + stats.norm.cdf((-HALF - a) / SIGMA)) \
            * stats.norm.pdf(a, 0, TAU)

    expected = integrate.quad(miss, -12 * TAU, 12 * TAU)[0]
    assert law.miss_rate == pytest.approx(expected, rel=1e-9)
    assert law.miss_rate == pytest.approx(2 * stats.norm.sf(1.96), rel=1e-9)  # same total sd


def _windows(rng: np.random.Generator, reps: int, days: int = 14) -> np.ndarray:
    shocks = rng.normal(0, TAU, (reps, days))
    noise = rng.normal(0, SIGMA, (reps, days, ROWS))
    return (np.abs(shocks[:, :, None] + noise) > HALF).sum(axis=(1, 2))


# Calibration by simulation of the random-effects model (common practice, no source): with the
# true parameters the law's test keeps its level at 5 %, 1 % and 0.1 %, while the quasi-binomial
# test (the Pearson dispersion of McCullagh & Nelder) rejects several times too often at 0.1 %.
@pytest.mark.slow
def test_the_law_keeps_its_level_where_the_quasi_binomial_tail_does_not() -> None:
    rng = np.random.default_rng(5)
    law = MissLaw(TAU**2, SIGMA**2, HALF)
    training = _windows(rng, 20000, days=1)
    phi = miss_dispersion(np.full(len(training), ROWS), training)
    reps = 20000
    misses = _windows(rng, reps)
    n = 14 * ROWS
    exact = np.array([law.pvalues([ROWS] * 14, int(m))[0] for m in misses])
    quasi = np.array([coverage_test(int(n - m), n, 1 - law.miss_rate, phi).pvalue_low
                      for m in misses])
    for alpha in (0.05, 0.01, 0.001):
        se = np.sqrt(alpha * (1 - alpha) / reps)
        assert (exact < alpha).mean() < alpha + 4 * se
    assert (exact < 0.05).mean() > 0.035  # a discrete test is conservative, but not grossly
    assert (quasi < 0.001).mean() > 2.5 * 0.001  # measured 3.6x with 200k windows


def test_tail_probabilities_match_simulation() -> None:
    rng = np.random.default_rng(9)
    law = MissLaw(TAU**2, SIGMA**2, HALF)
    misses = _windows(rng, 40000, days=5)
    for m in (20, 30, 40):
        expected = law.pvalues([ROWS] * 5, m)[0]
        observed = (misses >= m).mean()
        assert abs(observed - expected) < 4 * np.sqrt(expected * (1 - expected) / 40000) + 1e-4


def _anova_draws(rng: np.random.Generator, runs: int, days: int, rows: int, tau: float,
                 sigma: float) -> list:
    out = []
    for _ in range(runs):
        shocks = rng.normal(0, tau, days)
        values = shocks[:, None] + rng.normal(0, sigma, (days, rows))
        means = values.mean(axis=1)
        ssw = ((values - means[:, None]) ** 2).sum(axis=1)
        out.append(day_effects(np.full(days, rows), means, ssw))
    return out


# The bounds' defining property, checked by simulating the ANOVA estimators themselves (Searle,
# Casella & McCulloch 1992, §3.5): the true total spread lies below wide x estimate, and above
# narrow x estimate, in at least a share g of windows (4 binomial sd of slack). Two weeks with
# day shocks a third of the variance, and 60 days with them a fifth: the old lognormal bound,
# with its sd estimated from the same window, held only about 88 % of the time in the first.
@pytest.mark.parametrize(("days", "rows", "tau", "sigma"),
                         [(14, 60, 2.0, np.sqrt(8.0)), (60, 80, TAU, SIGMA)])
def test_spread_bounds_hold_their_guarantee(days: int, rows: int, tau: float,
                                            sigma: float) -> None:
    rng = np.random.default_rng(12)
    g, runs = 0.95, 2000
    truth = np.hypot(tau, sigma)
    below = above = 0
    for est in _anova_draws(rng, runs, days, rows, tau, sigma):
        estimate = np.sqrt(est.tau2 + est.sigma_w2)
        wide, narrow = spread_scales(est, g)
        below += truth <= wide * estimate
        above += truth >= narrow * estimate
    slack = 4 * np.sqrt(g * (1 - g) / runs)
    assert below / runs >= g - slack
    assert above / runs >= g - slack
    # and not wastefully wide: within 2 points of the guarantee
    assert below / runs <= g + 0.02 + slack


def test_a_single_mean_square_gets_the_chi_square_bounds() -> None:
    # Without day shocks (or for rows alone) the bound is the textbook one for a variance,
    # s² dof / χ²(dof) (scipy.stats.chi2 as the reference; Montgomery & Runger, Applied
    # Statistics and Probability for Engineers, eq. 8-21).
    dof, g = 40, 0.9
    wide, narrow = chi2_scales(dof, g)
    assert wide == pytest.approx(np.sqrt(dof / stats.chi2.ppf(1 - g, dof)), rel=1e-10)
    assert narrow == pytest.approx(np.sqrt(dof / stats.chi2.ppf(g, dof)), rel=1e-10)


def test_persistent_shocks_widen_the_bounds() -> None:
    est = day_effects(np.full(14, 60), np.linspace(-2, 2, 14), np.full(14, 59 * 8.0))
    plain, persistent = spread_scales(est, 0.95), spread_scales(est, 0.95, persistence=0.5)
    assert persistent[0] > plain[0] > 1 > plain[1] > persistent[1]


def test_a_guaranteed_scale_expects_more_misses() -> None:
    sure = MissLaw(TAU**2, SIGMA**2, HALF)
    wary = MissLaw(TAU**2, SIGMA**2, HALF, scale=chi2_scales(200, 0.9)[0])
    rows = [ROWS] * 14
    assert wary.miss_rate > sure.miss_rate
    assert wary.pvalues(rows, 90)[0] > sure.pvalues(rows, 90)[0]


def test_guarded_law_is_wary_in_both_directions() -> None:
    guarded = GuardedMissLaw.around(TAU**2, SIGMA**2, HALF, chi2_scales(200, 0.9))
    plain = MissLaw(TAU**2, SIGMA**2, HALF)
    rows = [ROWS] * 14
    result = guarded.test(rows, sum(rows) - 90, 0.95)
    assert result.pvalue_low == guarded.wide.pvalues(rows, 90)[0] > plain.pvalues(rows, 90)[0]
    few = guarded.test(rows, sum(rows) - 25, 0.95)
    assert few.pvalue_high == guarded.narrow.pvalues(rows, 25)[1] > plain.pvalues(rows, 25)[1]


def test_test_returns_a_coverage_result_with_the_exact_pvalues() -> None:
    law = MissLaw(TAU**2, SIGMA**2, HALF)
    result = law.test([80, 70, 0], 140, 0.95, dispersion=2.0)
    assert result.method == "day-effects" and result.n == 150 and result.covered == 140
    assert (result.pvalue_low, result.pvalue_high) == law.pvalues([80, 70], 10)
    assert result.wilson_low < result.coverage < result.wilson_high
    with pytest.raises(ValueError):
        law.pvalues([10], 11)


# --- windows past DIRECT_MAX_ROWS: the exponentially tilted FFT route -------------------------
# Claimed accuracy: the same p-values as the direct convolution of the same law, relative error
# below 1e-9 at every count, down to p-values of 1e-290 (measured: at most 5e-12).


def _full_day_pmf(law: MissLaw, n: int) -> np.ndarray:
    """A day's law by its definition, the whole support: sum over the Gauss-Hermite shock nodes
    (scipy.special.roots_hermite) of weight times scipy.stats.binom.pmf."""
    x, w = special.roots_hermite(SHOCK_NODES)
    tau, sw = np.sqrt(law.tau2) * law.scale, np.sqrt(law.sigma_w2) * law.scale
    shocks = np.sqrt(2.0) * tau * x
    p = stats.norm.sf((law.half_width - shocks) / sw) + stats.norm.cdf(
        (-law.half_width - shocks) / sw)
    k = np.arange(n + 1)
    log_pmf = stats.binom.logpmf(k[:, None], n, p[None, :]) + np.log(w / np.sqrt(np.pi))
    return np.exp(special.logsumexp(log_pmf, axis=1))


def _reference_tails(law: MissLaw, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """P(M >= m) and P(M <= m) for every m, by direct convolution of the untruncated days."""
    pmf = np.ones(1)
    for n in rows:
        pmf = np.convolve(pmf, _full_day_pmf(law, int(n)))
    return np.cumsum(pmf[::-1])[::-1], np.cumsum(pmf)


def _assert_relative(got: float, expected: float, rel: float) -> None:
    if expected > 1e-290:
        assert abs(got - expected) <= rel * min(expected, 1.0), (got, expected)
    else:
        assert got <= 1e-280


@pytest.mark.parametrize(("tau", "sigma", "scale"), [(TAU, SIGMA, 1.07), (TAU, SIGMA, 0.93),
                                                      (6.0, 2.0, 1.0), (0.5, SIGMA, 1.0)])
def test_tilted_route_equals_the_direct_convolution(tau: float, sigma: float,
                                                    scale: float) -> None:
    law = MissLaw(tau**2, sigma**2, HALF, scale)
    rows = np.random.default_rng(21).poisson(500, 14)  # ~7 000 rows: past DIRECT_MAX_ROWS
    assert rows.sum() > DIRECT_MAX_ROWS
    upper, lower = _reference_tails(law, rows)
    for m in np.unique(np.linspace(0, rows.sum(), 60).astype(int)):
        got_upper, got_lower = law.pvalues(rows, int(m))
        _assert_relative(got_upper, upper[m], 1e-9)
        _assert_relative(got_lower, lower[m], 1e-9)


def test_the_switch_between_routes_changes_nothing_reported(monkeypatch: pytest.MonkeyPatch
                                                            ) -> None:
    # the production direct route cuts each day's law where its upper tail is below 1e-18, so
    # the two routes are compared where that cut cannot matter (p-values above 1e-12)
    law = MissLaw(TAU**2, SIGMA**2, HALF, 1.05)
    rows = np.random.default_rng(4).poisson(500, 14)
    assert rows.sum() > DIRECT_MAX_ROWS
    tilted = [law.pvalues(rows, m) for m in range(150, 1400, 20)]
    monkeypatch.setattr(misses, "DIRECT_MAX_ROWS", 10**9)
    direct = [law.pvalues(rows, m) for m in range(150, 1400, 20)]
    for got, expected in zip(tilted, direct, strict=True):
        for g, e in zip(got, expected, strict=True):
            if e > 1e-12:
                assert g == pytest.approx(e, rel=1e-9)


# Without day effects the window is binomial: scipy.stats.binom (incomplete beta function) as the
# reference at 14 days of ~30 000 rows, including tails far below anything reported.
@pytest.mark.parametrize("z", [-40.0, -6.0, -2.0, 0.0, 0.4, 3.0, 10.0, 60.0])
def test_large_window_without_day_effects_is_binomial(z: float) -> None:
    law = MissLaw(0.0, SIGMA**2, HALF)
    p = 2 * stats.norm.sf(HALF / SIGMA)
    rows = np.random.default_rng(8).poisson(30000, 14)
    total = int(rows.sum())
    m = round(total * p + z * np.sqrt(total * p * (1 - p)))
    upper, lower = law.pvalues(rows, m)
    assert upper == pytest.approx(stats.binom.sf(m - 1, total, p), rel=1e-9, abs=1e-300)
    assert lower == pytest.approx(stats.binom.cdf(m, total, p), rel=1e-9, abs=1e-300)


# Without row noise a day's rows are all in or all out (its shock beyond the half-width or not):
# with equal days the window is n times a binomial over days (scipy.stats.binom), a law on a
# lattice of step n that the FFT route must not smear.
def test_large_window_without_row_noise_is_a_binomial_over_days() -> None:
    law = MissLaw(25.0, 0.0, 6.0)
    x, w = special.roots_hermite(SHOCK_NODES)
    share = float(w[np.abs(np.sqrt(2.0) * 5.0 * x) > 6.0].sum() / np.sqrt(np.pi))
    days, n = 14, 5000
    for k in range(days + 1):
        upper, lower = law.pvalues([n] * days, k * n)
        assert upper == pytest.approx(stats.binom.sf(k - 1, days, share), rel=1e-9)
        assert lower == pytest.approx(stats.binom.cdf(k, days, share), rel=1e-9)
        if k > 0:
            assert law.pvalues([n] * days, k * n - 1)[0] == pytest.approx(upper, rel=1e-9)


# At 30 000 rows a day the law (through the tilted route) against simulation of the random-effects
# model itself, continuous shocks (common practice, no source).
def test_high_volume_tails_match_simulation() -> None:
    rng = np.random.default_rng(30)
    law = MissLaw(TAU**2, SIGMA**2, HALF)
    reps, n = 40000, 30000
    shocks = rng.normal(0, TAU, (reps, 14))
    p = stats.norm.sf((HALF - shocks) / SIGMA) + stats.norm.cdf((-HALF - shocks) / SIGMA)
    counts = rng.binomial(n, p).sum(axis=1)
    for q in (0.5, 0.9, 0.99):
        m = int(np.quantile(counts, q))
        expected = law.pvalues([n] * 14, m)[0]
        observed = (counts >= m).mean()
        assert abs(observed - expected) < 4 * np.sqrt(expected * (1 - expected) / reps)
