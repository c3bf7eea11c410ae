"""The self-starting level of a version fitted on a short window (Hawkins 1987; Quesenberry 1991).

A version fitted on few days knows its level (the mean of a day's mean residual) only loosely, and
a chart that pays for that error up front needs a very wide limit. Instead, each new day's mean
residual ``r_t`` is compared with the mean ``m`` and sd ``s`` of the ``N`` day means known so far
(the fit window's days, then the monitored in-control days learned one by one):

    T_t = (r_t - m) / (s sqrt(1 + 1/N)),      Q_t = Φ⁻¹(F_{t, N-1}(T_t)).

Under the version, with independent normal day means, ``T_t`` follows Student's t on ``N - 1``
degrees of freedom and the ``Q_t`` are independent standard normal values (Quesenberry 1991,
*J. Quality Technology* 23, 213-224, Theorem 1; Hawkins 1987, *The Statistician* 36, 299-316),
so a CUSUM of ``Q`` has the run lengths of exactly known parameters from its first day. Learning
stops for good at the first finding (so a change is never learned into the level) and once ``N``
reaches the configured window.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from numpy.typing import ArrayLike

from monitor.stats import tails
from monitor.stats.moments import Moments
from monitor.stats.window_summary import DayEffects

Q_BOUND = 37.5  # |Q| beyond which the tail probability underflows a double (Φ(-37.5) ≈ 5e-308)


def level_of(values: ArrayLike) -> Moments:
    """The count, mean and centred sum of squares of day mean residuals (NaN ignored)."""
    v = np.asarray(values, dtype=np.float64).ravel()
    return Moments.of(v[np.isfinite(v)][:, None])


def learned(level: Moments, value: float) -> Moments:
    """``level`` with one more day mean residual (the pairwise update of Moments.merge)."""
    return level.merge(Moments.of([[value]]))


def q_value(level: Moments, value: float) -> float | None:
    """``Q`` of a new day mean residual against ``level``; None with fewer than 3 values or no
    spread."""
    n, m2 = level.n, float(level.comoment[0, 0]) if level.n else 0.0
    if n < 3 or not m2 > 0:
        return None
    s = math.sqrt(m2 / (n - 1))
    t = (value - float(level.mean[0])) / (s * math.sqrt(1.0 + 1.0 / n))
    # through the tail on the value's own side, so a far-out value keeps its digits; beyond
    # what a double can hold as a tail probability the value is clipped (still far past any
    # chart limit)
    if t > 0:
        q = float(tails.norm_isf(tails.t_sf(t, n - 1)))
    else:
        q = float(tails.norm_ppf(tails.t_cdf(t, n - 1)))
    return float(np.clip(q, -Q_BOUND, Q_BOUND)) if not math.isnan(q) else 0.0


def learned_effects(effects: DayEffects, base: Moments, level: Moments) -> DayEffects:
    """The fit window's day effects with the day-to-day spread re-estimated from the learned days.

    A day's mean residual varies by ``tau² + sigma_w²/n_d`` around the level, so the variance of
    the day means grows by the same amount as ``tau²`` when days are added. The fit window's
    between-day mean square is moved by ``n0`` times the change in that variance when the
    learned day means (``level``) join the fit window's (``base``):

        MSB_new = MSB_fit + n0 (var(base ∪ level) - var(base)),
        tau²_new = max(0, (MSB_new - MSW_fit) / n0),

    on ``G_fit + G_learned - 1`` degrees of freedom. With no learned day this is the fit window's
    ANOVA; with equally many rows every day it is the ANOVA of all the days but for the
    within-day mean square, which stays the fit window's (its rows pin it down well, and the
    spread test watches it). As learned days outnumber fit days, the fit window's own sampling
    error cancels (``MSB_fit/n0 - var(base)`` is about ``-MSW/n0``, nearly free of its shocks).
    Rows are counted at the fit window's rows per day (one-way random-effects ANOVA, Searle,
    Casella & McCulloch 1992, §3.5; the update is common practice, no source).
    """
    if level.n == 0 or base.n < 2:
        return effects
    both = base.merge(level)
    var_base = float(base.comoment[0, 0]) / (base.n - 1)
    var_both = float(both.comoment[0, 0]) / (both.n - 1)
    msb = max(effects.ms_between + effects.n0 * (var_both - var_base), 0.0)
    rows_per_day = effects.n_rows / effects.n_days if effects.n_days else 1.0
    days = effects.n_days + level.n
    return replace(effects, tau2=max(0.0, (msb - effects.ms_within) / effects.n0),
                   ms_between=msb, n_days=days,
                   n_rows=max(round(rows_per_day * days), days + 1))


@dataclass(frozen=True, eq=False)
class Learning:
    """What a self-starting version learned from its monitored days (stored with each check)."""

    level: Moments = field(default_factory=lambda: Moments.empty(1))
    stopped: bool = False  # a refit stopped the learning (until a restart)
    # the within-day slope chart's learning reference (monitor.stats.within_slope): per
    # predictor, Σ w_d and Σ w_d (b_d - beta_0) of the learned days, and how many days
    slope_weight: tuple[float, ...] = ()
    slope_sum: tuple[float, ...] = ()
    slope_days: int = 0
    # days held back before they are learned (``slope_learn_delay_days``), oldest first: each
    # day's w_d then w_d (b_d - beta_0) per predictor
    slope_pending: tuple[tuple[float, ...], ...] = ()
