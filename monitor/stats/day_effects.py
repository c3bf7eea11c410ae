"""Day effects: between-day and within-day variance of residuals.

Residuals of one day usually share a common shock (weather, staffing, a late shift). The one-way
random-effects model ``e_ij = a_i + w_ij`` with ``a_i ~ N(0, tau²)`` and ``w_ij ~ N(0, sigma_w²)``
is estimated by the analysis-of-variance (method of moments) estimators for unbalanced groups
(Searle, Casella & McCulloch, *Variance Components*, 1992, §3.5):

    MSW = SSW / (N - G),  MSB = SSB / (G - 1),  n0 = (N - Σ n_i² / N) / (G - 1),
    sigma_w² = MSW,  tau² = max(0, (MSB - MSW) / n0).

``F = MSB / MSW`` with ``(G - 1, N - G)`` degrees of freedom tests ``tau² = 0``.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import ArrayLike, NDArray

from monitor.stats import tails
from monitor.stats.moments import DayMoments
from monitor.stats.window_summary import DayEffects

FloatArray = NDArray[np.float64]


def day_effects(counts: ArrayLike, means: ArrayLike, within_ss: ArrayLike) -> DayEffects:
    """One-way random-effects ANOVA from per-day counts, mean residuals and within-day SS.

    Days with no rows are ignored. Needs at least two days and more rows than days.
    """
    n = np.asarray(counts, dtype=np.float64)
    m = np.asarray(means, dtype=np.float64)
    ssw_d = np.asarray(within_ss, dtype=np.float64)
    keep = n > 0
    n, m, ssw_d = n[keep], m[keep], ssw_d[keep]
    groups, total = len(n), float(n.sum())
    if groups < 2 or total <= groups:
        raise ValueError("day effects need at least two days and more rows than days")
    grand = float((n * m).sum() / total)
    ssb = float((n * (m - grand) ** 2).sum())
    ssw = float(ssw_d.sum())
    msb = ssb / (groups - 1)
    msw = ssw / (total - groups)
    n0 = (total - float((n**2).sum()) / total) / (groups - 1)
    tau2 = max(0.0, (msb - msw) / n0)
    if msw > 0:
        f = msb / msw
        p = float(tails.f_sf(f, groups - 1, total - groups))
    else:
        f, p = float("inf"), 0.0
    return DayEffects(tau2=tau2, sigma_w2=msw, n_days=groups, n_rows=int(total), n0=n0,
                      ms_between=msb, ms_within=msw, statistic=f, pvalue=p)


@dataclass(frozen=True, eq=False)
class DayResiduals:
    """Per-day residual summaries of a linear predictor: counts, mean residuals, within-day SS."""

    counts: NDArray[np.int64]
    means: FloatArray
    within_ss: FloatArray


def day_residuals(days: DayMoments, coef: ArrayLike) -> DayResiduals:
    """Residual summaries ``y - b0 - xᵀb`` per day, from day statistics alone.

    The day's mean residual is ``ȳ - b0 - x̄ᵀb``; its within-day sum of squares is ``wᵀ M w``
    with ``w = (-b, 1)`` and ``M`` the day's centred co-moment matrix of ``[x, y]``.
    """
    c = np.asarray(coef, dtype=np.float64)
    k = days.dim - 1
    if len(c) != k + 1:
        raise ValueError(f"{len(c)} coefficients for {k} predictors")
    w = np.concatenate([-c[1:], [1.0]])
    means = days.mean[:, k] - c[0] - days.mean[:, :k] @ c[1:]
    within = np.einsum("i,dij,j->d", w, days.comoment, w)
    means = np.where(days.n > 0, means, np.nan)
    return DayResiduals(np.asarray(days.n, dtype=np.int64), means, np.maximum(within, 0.0))


def day_effects_of_fit(days: DayMoments, coef: ArrayLike) -> DayEffects:
    """Variance components of a fit's residuals over the fit window's days."""
    r = day_residuals(days, coef)
    present = r.counts > 0
    return day_effects(r.counts[present], r.means[present], r.within_ss[present])


def net_of_rhythm(effects: DayEffects, offsets: ArrayLike, days_per_weekday: ArrayLike
                  ) -> DayEffects:
    """The day effects a chart that subtracts a weekly rhythm sees.

    The rhythm's share of the day-shock variance, ``Σ_w (G_w/G) o_w²`` for weekday offsets
    ``o_w`` seen on ``G_w`` of the ``G`` fit days, less what noise alone puts into estimated
    offsets (``(W - 1)/G`` times a day's variance ``tau² + sigma_w²/n0``, the expected between-
    group sum of squares of a one-way layout under no effect), leaves the day shocks; each
    offset is itself an average of about ``G/W`` days, and its error stays in every adjusted
    day: ``tau²_chart = tau²_net + (W/G)(tau²_net + sigma_w²/n0)`` (one-way analysis of
    variance, any textbook; common practice, no source).
    """
    counts = np.asarray(days_per_weekday, dtype=np.float64)
    off = np.asarray(offsets, dtype=np.float64)
    g = float(counts.sum())
    w = float((counts > 0).sum())
    if g <= w or w < 2:
        return effects
    day_var = effects.tau2 + effects.sigma_w2 / effects.n0
    explained = float(np.sum(counts * off**2) / g) - (w - 1) / g * day_var
    net = max(0.0, effects.tau2 - max(explained, 0.0))
    chart = net + (w / g) * (net + effects.sigma_w2 / effects.n0)
    return replace(effects, tau2=chart)
