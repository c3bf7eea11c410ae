"""How soon could any chart see a slope that creeps up 0.05 % a day? An oracle's answer.

    python3 tests/benchmarks/drift_bound.py [--rows 100] [--arl 5000] [--reps 2000]

The oracle is told everything but the day the creep starts: the creep is linear at a known
rate, and each day's own slope is exactly normal around the line with a known sd (the
within-day evidence of the departures generator, ``tests/benchmarks/departures.py``: pallets
uniform on 4..30, row sd 5 min, ``--rows`` rows a day). On the standardized day slopes ``z_s``
it runs the generalized likelihood-ratio rule for a drift of that known rate and unknown start
(Lai 1998, "Information bounds and quick detection of parameter changes in stochastic
systems", *IEEE Trans. Inf. Theory* 44, 2917-2929: asymptotically optimal among rules with a
given false-alarm spacing; window-limited as there):

    W_t = max over m of  Σ_{j=1..m} (a_j z_{t-m+j} - a_j²/2),   a_j = r j,

with ``r`` the drift per day in units of one day's slope sd. Its threshold is set by simulation
so that in control it crosses once in ``--arl`` days on average (up-crossings counted over
long in-control runs), and the delay is the first day it crosses after the creep began. No
chart that sees only day slopes, and keeps its false alarms as far apart, can expect to do much
better. ``--with-level`` also hands the oracle each day's mean, which moves by the creep times
the day's mean pallets (about 17) under day shocks of sd 2.5 min: two independent normal
streams drifting at ``r_1 j`` and ``r_2 j`` have the GLR of one stream drifting at
``sqrt(r_1² + r_2²) j``, so the level only raises ``r`` (it is the upper bound for a rule that
sees everything the production checks see, slope and level). Common practice, no source,
beyond Lai's rule.

``--step SHARE`` asks the same of a sudden change of ``SHARE`` of the slope (0.10 for +10 %):
with ``a_j = r`` constant the rule is Page's CUSUM with reference ``r/2``, optimal for a known
step (Moustakides 1986, *Ann. Statist.* 14, 1379-1387), and the printed bound is Lorden's
(1971) first-order delay ``log(arl) / (r²/2)``.
"""

from __future__ import annotations

import argparse
import math

import numpy as np

SIGMA = 5.0  # row sd, minutes (departures.py)
TAU = 2.5  # day shock sd, minutes (departures.py)
PALLETS = (4, 30)  # uniform integers
SLOPE = 2.1  # minutes per pallet
DRIFT = 0.0005  # share of the slope added per day
SLOPE_SD = 0.1  # random_slope: sd of each day's own pallet slope (minutes per pallet)
MIXED_SHARE = 0.25  # two_predictors: each pallet is a mixed one with this probability
CASES = ("textbook", "random_slope", "two_predictors")
WINDOW = 250  # longest run the rule looks back over (days)


def pallet_variance(case: str = "textbook") -> float:
    """The variance of pallets within a day that informs the pallet slope: all of it, or with
    mixed pallets beside it only what they leave (``Var x - Cov(x, m)² / Var m``)."""
    lo, hi = PALLETS
    var_x = ((hi - lo + 1) ** 2 - 1) / 12.0
    if case != "two_predictors":
        return var_x
    mean_x = 0.5 * (lo + hi)
    cov = MIXED_SHARE * var_x  # m = Bin(x, p): Cov(x, m) = p Var x
    var_m = MIXED_SHARE**2 * var_x + mean_x * MIXED_SHARE * (1.0 - MIXED_SHARE)
    return var_x - cov * cov / var_m


def day_sd_share(rows: float, case: str = "textbook") -> float:
    """The sd of one day's own slope as a share of the slope (n rows, pallets uniform)."""
    between = SLOPE_SD**2 if case == "random_slope" else 0.0
    return math.sqrt(SIGMA**2 / (rows * pallet_variance(case)) + between) / SLOPE


def information(rows: float, size: float, case: str, with_level: bool) -> float:
    """``r``: the shift of one day's evidence, in units of its sd, for a change of ``size`` of
    the slope (the day slope alone, or with the day mean: ``sqrt(m' Σ⁻¹ m)``)."""
    if not with_level:
        return size / day_sd_share(rows, case)
    lo, hi = PALLETS
    mean_x = 0.5 * (lo + hi)
    between = SLOPE_SD**2 if case == "random_slope" else 0.0
    cov = np.array([
        [SIGMA**2 / (rows * pallet_variance(case)) + between, between * mean_x],
        [between * mean_x, TAU**2 + SIGMA**2 / rows + between * mean_x**2]])
    shift = size * SLOPE * np.array([1.0, mean_x])
    return float(math.sqrt(shift @ np.linalg.solve(cov, shift)))


def glr_path(z: np.ndarray, r: float, window: int) -> np.ndarray:
    """W_t for every day of ``z`` (one run)."""
    n = len(z)
    best = np.full(n, -np.inf)
    csum_z = np.concatenate([[0.0], np.cumsum(z)])
    idx = np.arange(n)
    zj = np.concatenate([[0.0], np.cumsum(z * idx)])  # Σ s z_s
    for m in range(1, window + 1):
        if m > n:
            break
        t = idx[m - 1:]  # window ends
        k = t - m + 1  # window starts; a_j = r (s - k + 1) for s in k..t
        s_z = csum_z[t + 1] - csum_z[k]
        s_sz = zj[t + 1] - zj[k]
        weighted = r * (s_sz - (k - 1) * s_z)
        penalty = r * r * m * (m + 1) * (2 * m + 1) / 12.0
        np.maximum(best[m - 1:], weighted - penalty, out=best[m - 1:])
    return best


def cusum_path(z: np.ndarray, r: float) -> np.ndarray:
    """W_t of the rule for a known step (``a_j = r``): Page's CUSUM of ``r z - r²/2``,
    ``W_t = max(W_{t-1}, 0) + inc_t``, written without a loop as ``C_t - min_{s<t} C_s`` over
    the partial sums ``C`` (with ``C_0 = 0``)."""
    c = np.concatenate([[0.0], np.cumsum(r * z - 0.5 * r * r)])
    return c[1:] - np.minimum.accumulate(c)[:-1]


def path(z: np.ndarray, r: float, step: bool) -> np.ndarray:
    return cusum_path(z, r) if step else glr_path(z, r, WINDOW)


def threshold_for(arl: float, r: float, rng: np.random.Generator, days: int,
                  step: bool = False) -> float:
    """The level W crosses upward once in ``arl`` in-control days."""
    w = path(rng.standard_normal(days), r, step)[WINDOW:]
    lo, hi = 0.0, 40.0
    for _ in range(50):
        mid = 0.5 * (lo + hi)
        above = w > mid
        ups = int(np.count_nonzero(above[1:] & ~above[:-1]))
        if ups == 0 or len(w) / ups > arl:
            hi = mid
        else:
            lo = mid
    return hi


def delays(c: float, r: float, rng: np.random.Generator, reps: int, most: int,
           step: bool = False) -> np.ndarray:
    out = np.empty(reps)
    drift = np.full(most, r) if step else r * np.arange(1, most + 1)
    for i in range(reps):
        w = path(drift + rng.standard_normal(most), r, step)
        hit = np.flatnonzero(w > c)
        out[i] = hit[0] + 1 if len(hit) else np.inf
    return out


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=float, action="append",
                        help="rows a day (repeatable; default 5, 100 and 1000)")
    parser.add_argument("--arl", type=float, default=5000.0,
                        help="in-control days between false alarms (the slope chart's budget)")
    parser.add_argument("--reps", type=int, default=2000)
    parser.add_argument("--control-days", type=int, default=2_000_000)
    parser.add_argument("--seed", type=int, default=20261203)
    parser.add_argument("--with-level", action="store_true",
                        help="the oracle also sees each day's mean (slope and level evidence)")
    parser.add_argument("--case", choices=CASES, default="textbook",
                        help="whose day evidence the oracle sees (departures.py's cases)")
    parser.add_argument("--step", type=float, default=0.0,
                        help="a sudden change of this share of the slope instead of the creep")
    args = parser.parse_args()
    rng = np.random.default_rng(args.seed)
    step = args.step > 0
    size = args.step if step else DRIFT
    what = (f"a known step of {size * 100:g} % of the slope" if step else
            f"a known linear creep of {DRIFT * 100:.2f} % of the slope a day")
    seen = (", day slopes and day means" if args.with_level else "") + (
        f", case {args.case}" if args.case != "textbook" else "")
    print(f"oracle {'CUSUM' if step else 'GLR'} for {what}, "
          f"false alarms once in {args.arl:g} days ({args.control_days:,} in-control days, "
          f"{args.reps} {'steps' if step else 'creeps'}{seen})")
    print(f"{'rows/day':>9s} {'day sd':>7s} {'r':>8s} {'threshold':>9s} {'median':>7s} "
          f"{'p90':>5s}  {'Lorden' if step else 'Lai bound':>9s}")
    for rows in args.rows or [5.0, 100.0, 1000.0]:
        sd = day_sd_share(rows, args.case)
        r = information(rows, size, args.case, args.with_level)
        c = threshold_for(args.arl, r, rng, args.control_days, step)
        d = delays(c, r, rng, args.reps, 600, step)
        if step:
            lai = math.log(args.arl) / (0.5 * r * r)  # Lorden 1971, first order
        else:
            lai = (6.0 * math.log(args.arl) / r**2) ** (1.0 / 3.0)  # Σ (r s)²/2 = log(arl)
        print(f"{rows:9g} {sd * 100:6.2f}% {r:8.4f} {c:9.2f} {np.median(d):7.0f} "
              f"{np.percentile(d, 90):5.0f}  {lai:9.0f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
