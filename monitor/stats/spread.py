"""Spread: has the scatter around the line grown (or shrunk) since the fit?

Two figures. The *ratio* is the recent root-mean-square residual against the active
coefficients divided by the fit's ``s``: what a planner feels. The *test* compares the recent
within-day residual variance with the fit window's within-day variance ``sigma_w²`` by
``F = MSW_recent / MSW_fit`` on ``(N_r - G_r, N_f - G_f)`` degrees of freedom (the classical
variance-ratio F test). Within-day variances are untouched by day shocks and by a shift of the
line, so the test stays calibrated with day effects and answers only the spread question. When
the recent days hold too few repeated rows (one row a day), the test falls back to the total
residual variance against ``s²`` on ``(N_r, dof)``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from monitor.stats import tails
from monitor.stats.day_effects import DayResiduals

MIN_WITHIN_DF = 10


@dataclass(frozen=True)
class SpreadTest:
    ratio: float  # recent RMS residual / s; for "day spreads": typical day spread vs the fit's
    statistic: float  # variance ratio F
    df_num: float
    df_den: float
    pvalue: float  # H1: spread grew
    pvalue_narrower: float  # H1: spread shrank
    method: str  # "within-day" or "total"


def spread_test(recent: DayResiduals, s: float, dof: int, sigma_w2: float | None,
                within_df_fit: int | None) -> SpreadTest:
    """Spread of recent residuals (per-day summaries) against the fit's error scale."""
    present = recent.counts > 0
    n = recent.counts[present].astype(np.float64)
    means = recent.means[present]
    within = recent.within_ss[present]
    rows = float(n.sum())
    if rows == 0:
        nan = float("nan")
        return SpreadTest(nan, nan, nan, nan, nan, nan, "none")
    total_ss = float(within.sum() + (n * means**2).sum())
    ratio = float(np.sqrt(total_ss / rows) / s)
    within_df = rows - len(n)
    if sigma_w2 and within_df_fit and within_df >= MIN_WITHIN_DF and sigma_w2 > 0:
        f = float(within.sum() / within_df / sigma_w2)
        df_num, df_den, method = within_df, float(within_df_fit), "within-day"
    else:
        f = float(total_ss / rows / s**2)
        df_num, df_den, method = rows, float(dof), "total"
    return SpreadTest(ratio, f, df_num, df_den, float(tails.f_sf(f, df_num, df_den)),
                      float(tails.f_cdf(f, df_num, df_den)), method)
