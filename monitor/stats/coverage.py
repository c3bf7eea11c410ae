"""Coverage of prediction intervals: Wilson interval and one-sided tests with over-dispersion.

Misses of one day are not independent when the day's rows share a common shock, so the
binomial variance of a window's miss count is inflated by a dispersion factor ``phi >= 1``
estimated on the fit window (quasi-binomial; McCullagh & Nelder, *Generalized Linear Models*,
2nd ed., §4.5: Pearson's X² / residual df). The tests use the binomial tail extended to
non-integer counts through the regularized incomplete beta function,
``P(X <= k) = I_{1-L}(n - k, k + 1)``, applied to the effective counts ``n / phi`` and
``k / phi``. With ``phi = 1`` this is exactly the binomial test.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy
from numpy.typing import ArrayLike

from monitor.stats import tails


@dataclass(frozen=True)
class CoverageTest:
    """How often the intervals covered in a window, against the promised level."""

    n: int
    covered: int
    target: float
    dispersion: float
    wilson_low: float
    wilson_high: float
    pvalue_low: float  # H1: coverage below target (intervals too narrow or model off)
    pvalue_high: float  # H1: coverage above target (intervals wider than needed)
    method: str = "quasi-binomial"  # or "day-effects" (monitor.stats.misses.MissLaw.test)

    @property
    def coverage(self) -> float:
        return self.covered / self.n if self.n else float("nan")

    @property
    def effective_n(self) -> float:
        return self.n / self.dispersion


def wilson_interval(covered: float, n: float, level: float = 0.95) -> tuple[float, float]:
    """Wilson (1927) score interval for a proportion; counts may be non-integer (effective)."""
    if n <= 0:
        return float("nan"), float("nan")
    z = tails.norm_ppf(0.5 + level / 2)
    p = covered / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return float(max(0.0, centre - half)), float(min(1.0, centre + half))


def coverage_test(covered: int, n: int, target: float, dispersion: float = 1.0,
                  level: float = 0.95) -> CoverageTest:
    """Wilson interval and both one-sided tests of the window's coverage against ``target``."""
    if not 0 < target < 1:
        raise ValueError(f"the target coverage must lie in (0, 1); got {target}")
    if dispersion < 1:
        raise ValueError(f"the dispersion factor is at least 1; got {dispersion}")
    if covered < 0 or covered > n:
        raise ValueError(f"covered rows ({covered}) must lie between 0 and n ({n})")
    if n == 0:
        nan = float("nan")
        return CoverageTest(0, 0, target, dispersion, nan, nan, nan, nan)
    ne, ke = n / dispersion, covered / dispersion
    low, high = wilson_interval(ke, ne, level)
    # P(X <= k) = I_{1-L}(n - k, k + 1); P(X >= k) = I_L(k, n - k + 1)
    p_low = 1.0 if covered >= n else float(scipy.special.betainc(ne - ke, ke + 1, 1 - target))
    p_high = 1.0 if covered <= 0 else float(scipy.special.betainc(ke, ne - ke + 1, target))
    return CoverageTest(n, covered, target, dispersion, low, high, p_low, p_high)


def miss_dispersion(rows: ArrayLike, misses: ArrayLike) -> float:
    """Pearson dispersion of daily miss counts around the pooled miss rate, floored at 1.

    ``phi = X² / (G - 1)`` with ``X² = Σ (m_d - n_d π)² / (n_d π (1 - π))`` over days with rows.
    """
    n = np.asarray(rows, dtype=np.float64)
    m = np.asarray(misses, dtype=np.float64)
    keep = n > 0
    n, m = n[keep], m[keep]
    if len(n) < 2:
        return 1.0
    rate = m.sum() / n.sum()
    if rate <= 0 or rate >= 1:
        return 1.0
    pearson = float(((m - n * rate) ** 2 / (n * rate * (1 - rate))).sum())
    return max(1.0, pearson / (len(n) - 1))
