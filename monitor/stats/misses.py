"""The in-control law of a window's interval misses when days share a common shock.

A row misses its interval when ``|a_d + w| > c``, with the day's shock ``a_d ~ N(0, tau²)``
shared by the day's rows, the row's own noise ``w ~ N(0, sigma_w²)`` and the interval half-width
``c = t · s``. Given the shock, a day's misses are binomial; over shocks they are a mixture,
computed with Gauss–Hermite quadrature (Abramowitz & Stegun 25.4.46); a window's misses are the
convolution of its days. The parameters come from the fit window and are themselves estimates:
the true spread may be a factor ``r`` off, ``log r ~ N(0, sd²)`` with ``sd`` from
:func:`spread_uncertainty`. As for the bias chart's limit (Gandy & Kvaløy 2013), the law is
taken at ``r = exp(z_g · sd)``, the ``g`` quantile (``guaranteed_scale``): a test built on it
holds its level for at least a share ``g`` of the fit windows one could have drawn, rather than
only on average over them (with ``r = 1`` a fit that happened to underestimate the day-to-day
spread would make the coverage test cry wolf for as long as it stays active).

Why not the quasi-binomial tail alone: with day effects the window's miss count is skewed, and
at the 0.1 % level the quasi-binomial test rejects about 3.5 times too often even with exact
parameters (measured; see tests/stats/test_misses.py). This law gets the tail right.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special, stats

from monitor.stats.coverage import CoverageTest, coverage_test
from monitor.stats.day_effects import DayEffects

FloatArray = NDArray[np.float64]
SHOCK_NODES = 48


@dataclass(frozen=True)
class MissLaw:
    """Misses of rows whose intervals have half-width ``half_width`` under day effects."""

    tau2: float
    sigma_w2: float
    half_width: float
    scale: float = 1.0  # true spread / estimated spread assumed by the law

    def __post_init__(self) -> None:
        if self.tau2 < 0 or self.sigma_w2 < 0 or self.tau2 + self.sigma_w2 <= 0:
            raise ValueError("the residual variances must be >= 0 and not both zero")
        if not self.half_width > 0:
            raise ValueError(f"the interval half-width must be positive; got {self.half_width}")
        if not self.scale > 0:
            raise ValueError(f"the spread scale must be positive; got {self.scale}")

    @property
    def miss_rate(self) -> float:
        """The expected share of rows outside their interval under this law."""
        return float(_miss_probabilities(self.tau2, self.sigma_w2, self.half_width, self.scale)
                     @ _shock_weights())

    def pvalues(self, day_rows: ArrayLike, misses: int) -> tuple[float, float]:
        """``P(M >= misses)`` and ``P(M <= misses)`` for a window with these rows per day."""
        rows = np.asarray(day_rows, dtype=np.int64)
        rows = rows[rows > 0]
        total = int(rows.sum())
        if not 0 <= misses <= total:
            raise ValueError(f"misses ({misses}) must lie between 0 and the rows ({total})")
        if total == 0:
            return float("nan"), float("nan")
        pmf = np.ones(1)
        for n in rows:
            pmf = np.convolve(pmf, _day_pmf(self.tau2, self.sigma_w2, self.half_width,
                                            self.scale, int(n)))
        upper = float(pmf[misses:].sum()) if misses < len(pmf) else 0.0
        return min(upper, 1.0), float(min(pmf[:misses + 1].sum(), 1.0))

    def test(self, day_rows: ArrayLike, covered: int, target: float, dispersion: float = 1.0,
             level: float = 0.95) -> CoverageTest:
        """A window's coverage: Wilson interval on the quasi-binomial effective size, and
        one-sided p-values from this law (low: too many misses; high: too few)."""
        rows = int(np.asarray(day_rows, dtype=np.int64).sum())
        quasi = coverage_test(covered, rows, target, dispersion, level)
        if rows == 0:
            return replace(quasi, method="day-effects")
        low, high = self.pvalues(day_rows, rows - covered)
        return replace(quasi, pvalue_low=low, pvalue_high=high, method="day-effects")


@lru_cache(maxsize=4096)
def _day_pmf(tau2: float, sigma_w2: float, half_width: float, scale: float,
             n: int) -> FloatArray:
    """The law of a day's misses among ``n`` rows: a binomial mixed over the day's shock.

    Computed in logs (log-gamma binomial coefficients) and cut where the remaining upper tail
    is below 1e-18 of the mass; cached, since the same law meets the same day sizes nightly.
    """
    p = _miss_probabilities(tau2, sigma_w2, half_width, scale)
    k = np.arange(n + 1, dtype=np.float64)
    log_coef = special.gammaln(n + 1) - special.gammaln(k + 1) - special.gammaln(n - k + 1)
    with np.errstate(divide="ignore"):
        log_pmf = (log_coef[:, None] + special.xlogy(k[:, None], p[None, :])
                   + special.xlog1py((n - k)[:, None], -p[None, :]))
    pmf = np.exp(log_pmf) @ _shock_weights()
    pmf /= pmf.sum()
    tail = np.cumsum(pmf[::-1])[::-1]
    keep = int(np.searchsorted(-tail, -1e-18, side="right"))
    out = pmf[:max(keep, 1)].copy()
    out.setflags(write=False)
    return out


def _miss_probabilities(tau2: float, sigma_w2: float, half_width: float,
                        scale: float) -> FloatArray:
    """The miss probability of a row, given the day's shock at each quadrature node."""
    x, _ = _hermite()
    tau, sw = np.sqrt(tau2) * scale, np.sqrt(sigma_w2) * scale
    shocks = np.sqrt(2.0) * tau * x
    if sw == 0:
        return (np.abs(shocks) > half_width).astype(np.float64)
    upper = stats.norm.sf((half_width - shocks) / sw)
    lower = stats.norm.cdf((-half_width - shocks) / sw)
    return np.clip(upper + lower, 0.0, 1.0)


@lru_cache(maxsize=1)
def _hermite() -> tuple[FloatArray, FloatArray]:
    return special.roots_hermite(SHOCK_NODES)


def _shock_weights() -> FloatArray:
    return _hermite()[1] / np.sqrt(np.pi)


@dataclass(frozen=True)
class GuardedMissLaw:
    """Coverage tests that hold their level whichever way the fitted spread erred.

    "Too many misses" is judged against the law with the spread at its guaranteed upper bound
    (``wide``), "too few" against the spread at its lower bound (``narrow``).
    """

    wide: MissLaw
    narrow: MissLaw

    @classmethod
    def around(cls, tau2: float, sigma_w2: float, half_width: float, log_sd: float,
               guarantee: float) -> GuardedMissLaw:
        scale = guaranteed_scale(log_sd, guarantee)
        return cls(MissLaw(tau2, sigma_w2, half_width, scale),
                   MissLaw(tau2, sigma_w2, half_width, 1.0 / scale))

    def test(self, day_rows: ArrayLike, covered: int, target: float, dispersion: float = 1.0,
             level: float = 0.95) -> CoverageTest:
        low = self.wide.test(day_rows, covered, target, dispersion, level)
        high = self.narrow.test(day_rows, covered, target, dispersion, level)
        return replace(low, pvalue_high=high.pvalue_high)


def guaranteed_scale(log_sd: float, guarantee: float) -> float:
    """``r`` such that the true spread is at most ``r`` times the estimate with probability
    ``guarantee``, when ``log(true / estimate) ~ N(0, log_sd²)`` (see
    :func:`spread_uncertainty`; for independent rows ``log_sd = 1 / sqrt(2 dof)``)."""
    if not 0 < guarantee < 1:
        raise ValueError(f"the guarantee is a probability in (0, 1); got {guarantee}")
    return float(np.exp(stats.norm.ppf(guarantee) * log_sd))


def spread_uncertainty(effects: DayEffects) -> float:
    """Standard deviation of ``log`` of the estimated total spread ``sqrt(tau² + sigma_w²)``.

    From the ANOVA estimators' sampling laws under normality (Searle, Casella & McCulloch
    1992, §3.5): ``MSW ~ sigma_w² χ²(N-G)/(N-G)``, ``MSB ~ (sigma_w² + n0 tau²) χ²(G-1)/(G-1)``
    and ``tau² + sigma_w² = MSB/n0 + MSW (1 - 1/n0)``; delta method for the logarithm.
    """
    g, n = effects.n_days, effects.n_rows
    total = effects.tau2 + effects.sigma_w2
    if g < 2 or n <= g or total <= 0:
        return 0.0
    n0 = effects.n0
    msb = effects.sigma_w2 + n0 * effects.tau2
    var = (2 * msb**2 / ((g - 1) * n0**2)
           + (1 - 1 / n0) ** 2 * 2 * effects.sigma_w2**2 / (n - g))
    return float(np.sqrt(var) / (2 * total))
