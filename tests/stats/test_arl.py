"""ARL of the tabular CUSUM against published tables, a Markov chain and a simulation."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import norm

from monitor.stats.arl import cusum_arl, siegmund_arl, solve_h, solve_h_many

# Two-sided CUSUM, k = 0.5, zero start (docs/references.md, "ARL of the tabular CUSUM").
ARL_SHIFTS = [0, 0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 2.5, 3.0, 4.0]
# Lucas & Crosier (1982), Technometrics 24, 199-205, Table 1, h = 4: read as quoted in the R
# package spc, man/xcusum.arl.Rd, examples ("results in the original paper are (in Table 1)");
# the shift-5 entry 1.31 from the same table.
ARL_K05_H4 = [168, 74.2, 26.6, 13.3, 8.38, 4.75, 3.34, 2.62, 2.19, 1.71]
# Montgomery, Introduction to Statistical Quality Control, Table 9.3, h = 5: from memory (the
# book was not at hand). Checked here independently by simulation (see the Monte Carlo tests).
ARL_K05_H5 = [465, 139, 38.0, 17.0, 10.4, 5.75, 4.01, 3.11, 2.57, 2.01]
# Vance (1986), Table 1 (with Goel & Wu 1971), one-sided CUSUM, k = 0, h = 10: read as quoted in
# the spc package's xcusum.arl examples ("results in the original paper are").
VANCE_SHIFTS = [-0.25, -0.125, 0.0, 0.125, 0.25, 0.5, 0.75, 1.0]
VANCE_K0_H10 = [2071.51, 400.28, 124.66, 59.30, 36.71, 20.37, 14.06, 10.75]


def _half_unit(printed: float) -> float:
    """Half a unit in the last printed digit (3 significant figures in both tables)."""
    return 0.5 * 10.0 ** (np.floor(np.log10(printed)) - 2)


@pytest.mark.parametrize(("h", "table"), [(4.0, ARL_K05_H4), (5.0, ARL_K05_H5)],
                         ids=["lucas-crosier-1982-table1-h4", "montgomery-table-9.3-h5"])
def test_integral_equation_reproduces_published_tables(h, table):
    arl = cusum_arl(0.5, h, np.array(ARL_SHIFTS))
    printed = np.array(table, dtype=float)
    # within the published rounding (max 0.49 on 139 and 465, i.e. 0.36 %) ...
    assert np.all(np.abs(arl - printed) <= [_half_unit(p) + 1e-9 for p in printed])
    # ... that is, within 0.4 %
    assert np.max(np.abs(arl / printed - 1)) < 0.004


def test_lucas_crosier_shift_5():
    assert cusum_arl(0.5, 4.0, 5.0) == pytest.approx(1.31, abs=0.005)  # L&C Table 1


def test_one_sided_arl_reproduces_vance_1986():
    # Vance solved the integral equation by Nystrom / Gauss-Legendre quadrature and printed two
    # decimals: reached within that rounding (0.005) or 0.01 %, whichever is larger (2071.57
    # against 2071.51 at the longest run length).
    arl = cusum_arl(0.0, 10.0, np.array(VANCE_SHIFTS), sides=1)
    printed = np.array(VANCE_K0_H10)
    assert np.all(np.abs(arl - printed) <= np.maximum(0.005 + 1e-9, 1e-4 * printed))


def brook_evans(k, h, mean, states):
    """Brook & Evans (1972) Markov-chain ARL of the one-sided CUSUM, written for this test.

    States are the centres ``i w`` (``w = 2h/(2m-1)``) of ``m`` cells covering ``[0, h]``; the
    zero state takes every value below ``w/2``.
    """
    w = 2.0 * h / (2 * states - 1)
    centre = np.arange(states) * w
    edges = np.concatenate([[-np.inf], (np.arange(states) + 0.5) * w])
    cdf = norm.cdf(edges[None, :] - centre[:, None] + k - mean)
    p = np.diff(cdf, axis=1)
    return np.linalg.solve(np.eye(states) - p, np.ones(states))[0]


@pytest.mark.parametrize("mean", [0.0, 0.5, 1.0, 2.0])
def test_integral_equation_agrees_with_brook_evans_markov_chain(mean):
    # Brook & Evans with 300 and 600 states, Richardson-extrapolated (error O(1/m²)).
    coarse, fine = brook_evans(0.5, 5.0, mean, 300), brook_evans(0.5, 5.0, mean, 600)
    chain = (4.0 * fine - coarse) / 3.0
    assert cusum_arl(0.5, 5.0, mean, sides=1) == pytest.approx(chain, rel=1e-6)


def test_scale_invariance_of_mean_and_sd():
    # N(mean, sd²) with (k, h) is the standard chart with (k/sd, h/sd) and mean/sd.
    direct = cusum_arl(0.8, 6.0, 0.3, 2.0)
    scaled = cusum_arl(0.4, 3.0, 0.15, 1.0)
    assert direct == pytest.approx(scaled, rel=1e-10)


def _run_lengths(k, h, mean, sd, runs, seed):
    """Run lengths of the two-sided tabular CUSUM (Page 1954), simulated ``runs`` times."""
    rng = np.random.default_rng(seed)
    upper, lower = np.zeros(runs), np.zeros(runs)
    length = np.zeros(runs)
    active = np.arange(runs)
    t = 0
    while active.size:
        t += 1
        u = rng.normal(mean, sd, active.size)
        upper[active] = np.maximum(0.0, upper[active] + u - k)
        lower[active] = np.maximum(0.0, lower[active] - u - k)
        hit = (upper[active] > h) | (lower[active] > h)
        length[active[hit]] = t
        active = active[~hit]
    return length


def test_monte_carlo_run_length_two_sided():
    # Seeded simulation of the two-sided chart at a point with short run lengths; the tolerance is
    # four standard errors of the simulated mean. Checks mean/sd handling and the Lucas-Crosier
    # combination at once (common practice, no source: Monte Carlo ARL check).
    k, h, mean, sd = 0.5, 3.0, 0.8, 1.3
    length = _run_lengths(k, h, mean, sd, 40_000, 20240611)
    se = length.std(ddof=1) / np.sqrt(length.size)
    expected = cusum_arl(k, h, mean, sd)
    assert abs(length.mean() - expected) < 4.0 * se, (length.mean(), expected, se)


@pytest.mark.parametrize(("shift", "printed", "runs"), [(0.0, 465, 40_000), (1.0, 10.4, 40_000)])
def test_monte_carlo_confirms_the_h5_column(shift, printed, runs):
    # The h = 5 column is from memory: a seeded simulation of the chart checks the remembered
    # value and the integral equation at once, each within four standard errors of the simulated
    # mean (about 2 % at shift 0, 1 % at shift 1).
    length = _run_lengths(0.5, 5.0, shift, 1.0, runs, 1985)
    se = length.std(ddof=1) / np.sqrt(runs)
    assert abs(length.mean() - printed) < 4.0 * se, (length.mean(), printed, se)
    assert abs(length.mean() - cusum_arl(0.5, 5.0, shift)) < 4.0 * se


# Siegmund (1985) approximation, one-sided ARL = (exp(-2 D b) + 2 D b - 1) / (2 D²) with
# b = h + 1.166, two-sided by 1/ARL = 1/ARL+ + 1/ARL-. The figures are Montgomery's worked
# example of it for k = 0.5, h = 5 (ARL0+ = 938.2, two-sided ARL0 = 469.1, ARL1+ = 10.34 at a
# one-sigma shift): from memory.
def test_siegmund_values():
    assert siegmund_arl(0.5, 5.0, sides=1) == pytest.approx(938.2, abs=0.05)
    assert siegmund_arl(0.5, 5.0) == pytest.approx(469.1, abs=0.05)
    assert siegmund_arl(0.5, 5.0, 1.0, sides=1) == pytest.approx(10.34, abs=0.005)


def test_siegmund_is_continuous_at_zero_drift():
    # shift = k makes D = 0, where the approximation is b² (Siegmund's own limit case). Around it
    # the function must be continuous and smooth: the ARL falls as the shift grows, and the gap
    # to b² shrinks in proportion to the distance (50 times closer, 50 times smaller, within 2 %).
    # Common practice, no source.
    b2 = (5.0 + 1.166) ** 2
    assert siegmund_arl(0.5, 5.0, 0.5, sides=1) == pytest.approx(b2, rel=1e-12)
    for eps in (1e-3, 2e-5):
        below, above = siegmund_arl(0.5, 5.0, 0.5 + np.array([-eps, eps]), sides=1)
        assert below > b2 > above
    far = siegmund_arl(0.5, 5.0, 0.5 + np.array([-1e-3, 1e-3]), sides=1) - b2
    near = siegmund_arl(0.5, 5.0, 0.5 + np.array([-2e-5, 2e-5]), sides=1) - b2
    np.testing.assert_allclose(far / near, 50.0, rtol=0.02)


# inversion -----------------------------------------------------------------------------------
@pytest.mark.parametrize(("mean", "sd", "target"), [(0.0, 1.0, 1000.0), (0.0, 1.0, 465.44),
                                                     (0.2, 1.3, 500.0), (-0.1, 0.8, 2000.0)])
def test_solve_h_round_trip(mean, sd, target):
    h = solve_h(0.5, target, mean, sd)
    assert cusum_arl(0.5, h, mean, sd) == pytest.approx(target, rel=1e-9)


def test_solve_h_matches_the_table():
    assert solve_h(0.5, cusum_arl(0.5, 5.0)) == pytest.approx(5.0, abs=1e-9)
    assert solve_h(0.5, 1000.0) == pytest.approx(5.7574, abs=1e-4)  # integral eq., this module


def test_solve_h_many_matches_solve_h():
    rng = np.random.default_rng(3)
    mean, sd = rng.uniform(-0.3, 0.3, 60), rng.uniform(0.6, 1.6, 60)
    many = solve_h_many(0.5, 1000.0, mean, sd)
    single = [solve_h(0.5, 1000.0, m, s) for m, s in zip(mean, sd, strict=True)]
    np.testing.assert_allclose(many, single, rtol=0, atol=1e-8)


def test_solve_h_many_edges():
    # a chart that never signals needs no interval; a drift beyond k cannot wait 1000 periods
    out = solve_h_many(0.5, 1000.0, [0.0, 3.0], [0.01, 1.0])
    assert out[0] == 0.0 and np.isinf(out[1])
    with pytest.raises(ValueError, match="h = 0"):
        solve_h(0.5, 1.5)
    with pytest.raises(ValueError, match="no h"):
        solve_h(0.5, 1000.0, mean=3.0)
    with pytest.raises(ValueError, match="sides"):
        cusum_arl(0.5, 4.0, sides=3)


def test_quadrature_has_converged():
    # The production node count against 256 nodes: relative error below 1e-8 for ARLs up to 1e6.
    from monitor.stats.arl import _nystrom, _one_sided_arl

    drift = np.array([-0.2, -0.5, -0.8, -1.2, 0.5, 2.0, -0.5, -0.3, -0.6])
    eta = np.array([5.0, 5.0, 5.0, 5.0, 5.0, 5.0, 10.0, 8.0, 9.0])
    fine = _nystrom(drift, eta, 256)
    assert fine.max() < 1e6
    np.testing.assert_allclose(_one_sided_arl(drift, eta), fine, rtol=1e-8)
