"""The in-control law of a window's interval misses when days share a common shock.

A row misses its interval when ``|a_d + w| > c``, with the day's shock ``a_d ~ N(0, tau²)``
shared by the day's rows, the row's own noise ``w ~ N(0, sigma_w²)`` and the interval half-width
``c = t · s``. Given the shock, a day's misses are binomial; over shocks they are a mixture,
computed with Gauss–Hermite quadrature (Abramowitz & Stegun 25.4.46); a window's misses are the
convolution of its days. The parameters come from the fit window and are themselves estimates:
the true spread may be a factor ``r`` off. As for the bias chart's limit (Gandy & Kvaløy
2013), the law is taken at ``r``'s one-sided ``g`` confidence bound (:func:`spread_scales`): a
test built on it holds its level for at least a share ``g`` of the fit windows one could have
drawn, rather than only on average over them (with ``r = 1`` a fit that happened to
underestimate the day-to-day spread would make the coverage test cry wolf for as long as it
stays active).

Why not the quasi-binomial tail alone: with day effects the window's miss count is skewed, and
at the 0.1 % level the quasi-binomial test rejects about 3.5 times too often even with exact
parameters (measured; see tests/stats/test_misses.py). This law gets the tail right.

Cost. Convolving the days' laws one after another costs about (rows of the window)² operations:
fine for small windows, hopeless for large ones (14 days at 12 000 rows a day took minutes).
Windows of more than ``DIRECT_MAX_ROWS`` rows are computed from the same law by an exponentially
tilted FFT convolution (:func:`_tilted_pvalues`): the law is tilted (Esscher 1932) so that its
mass sits at the observed count, each day's tilted law (again a mixture of binomials) is built
only where its mass exceeds 1e-22 (Bernstein's inequality), the window's tilted law is cut where
the Chernoff (1952) bound leaves less than 1e-18 beyond, the days are convolved by FFT on that
range, and the tilt is undone on the tail that is summed. Nothing is approximated beyond those
cuts and floating point: the p-values agree with the direct convolution to a relative 1e-9 or
better at every size and depth of tail tested (tests/stats/test_misses.py), far inside the three
decimals reported and the decision thresholds. Its cost is linear in the window's rows (up to
the FFT's logarithm). A saddle-point approximation (Lugannani & Rice 1980, with Daniels' 1987
continuity correction) would be cheaper still but was measured 0.7 % off in relative terms in
the tail and up to 5e-4 off near the centre for a 14-day window, which the exact route avoids.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np
import scipy
from numpy.typing import ArrayLike, NDArray

from monitor.stats import tails
from monitor.stats.coverage import CoverageTest, coverage_test
from monitor.stats.window_summary import DayEffects

FloatArray = NDArray[np.float64]
SHOCK_NODES = 48
# Windows of at most this many rows are convolved directly (exact, as always, and the faster of
# the two up to about 7 000 rows); larger ones by the tilted FFT route, which gives the same
# p-values (relative 1e-9 or better) at a cost linear in the rows.
DIRECT_MAX_ROWS = 6000
_WINDOW_TAIL = 1e-18  # tilted mass left beyond each end of the window's range (Chernoff bound)
NODE_TAIL = 1e-22  # tilted mass left out per day size and shock node (Bernstein bound)


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

    def node_probabilities(self) -> FloatArray:
        """A row's miss probability given the day's shock at each quadrature node."""
        return _miss_probabilities(self.tau2, self.sigma_w2, self.half_width, self.scale)

    def pvalues(self, day_rows: ArrayLike, misses: int) -> tuple[float, float]:
        """``P(M >= misses)`` and ``P(M <= misses)`` for a window with these rows per day."""
        rows = window_rows(day_rows, misses)
        total = int(rows.sum())
        if total == 0:
            return float("nan"), float("nan")
        if total > DIRECT_MAX_ROWS:
            tilted = _tilted_pvalues(self.node_probabilities(), rows, misses)
            if tilted is not None:
                return tilted
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
    gammaln = scipy.special.gammaln
    log_coef = gammaln(n + 1) - gammaln(k + 1) - gammaln(n - k + 1)
    with np.errstate(divide="ignore"):
        log_pmf = (log_coef[:, None] + scipy.special.xlogy(k[:, None], p[None, :])
                   + scipy.special.xlog1py((n - k)[:, None], -p[None, :]))
    pmf = np.exp(log_pmf) @ _shock_weights()
    pmf /= pmf.sum()
    tail = np.cumsum(pmf[::-1])[::-1]
    keep = int(np.searchsorted(-tail, -1e-18, side="right"))
    out = pmf[:max(keep, 1)].copy()
    out.setflags(write=False)
    return out


class _WindowCgf:
    """Cumulant generating function ``K(s) = log E exp(s M)`` of a window's misses.

    ``M`` is a sum over days of mixtures over the shock nodes of binomials: day ``d`` contributes
    ``log sum_j w_j (1 - p_j + p_j e^s)^n_d``. The law tilted by ``e^(s M)`` is of the same kind,
    with node weights ``pi_dj`` and miss probabilities ``q_j = expit(logit p_j + s)``.
    """

    def __init__(self, p: FloatArray, day_rows: NDArray[np.int64]) -> None:
        sizes, counts = np.unique(day_rows, return_counts=True)
        self.sizes, self.counts = sizes, counts.astype(np.float64)
        self.n = sizes.astype(np.float64)[:, None]
        self.logit = scipy.special.logit(p)
        with np.errstate(divide="ignore"):
            self.log_p, self.log_1mp = np.log(p), np.log1p(-p)
            self.log_w = np.log(_shock_weights())

    def tilt(self, s: float) -> tuple[FloatArray, FloatArray, FloatArray]:
        """Per day size: ``K_d(s)``; per day size and node: tilted weights; per node: ``q_j``."""
        log_mgf = self.log_w + self.n * np.logaddexp(self.log_1mp, self.log_p + s)
        top = log_mgf.max(axis=1)
        k_day = top + np.log(np.exp(log_mgf - top[:, None]).sum(axis=1))
        return k_day, np.exp(log_mgf - k_day[:, None]), scipy.special.expit(self.logit + s)

    def __call__(self, s: float) -> tuple[float, float, float]:
        """``K(s)``, ``K'(s)`` (the tilted mean) and ``K''(s)`` (the tilted variance)."""
        k_day, weights, q = self.tilt(s)
        nq = self.n * q
        mean = (weights * nq).sum(axis=1)
        var = (weights * nq * (1.0 - q)).sum(axis=1) + (weights * nq**2).sum(axis=1) - mean**2
        c = self.counts
        return float(c @ k_day), float(c @ mean), float(c @ np.maximum(var, 0.0))


def _saddlepoint(cgf: _WindowCgf, x: float) -> float | None:
    """A tilt ``s`` whose tilted mean ``K'(s)`` is within a tenth of a standard deviation of
    ``x`` (safeguarded Newton; ``K'`` increases). Any ``s`` gives exact results; this one puts
    the tilted mass where the tail is summed. None when the law cannot reach ``x``."""
    lo, hi, s = -np.inf, np.inf, 0.0
    for _ in range(200):
        _, mean, var = cgf(s)
        if abs(mean - x) <= 0.1 * np.sqrt(var):
            return s
        if mean < x:
            lo = s
        else:
            hi = s
        step = s - (mean - x) / var if var > 0 else np.nan
        if not lo < step < hi:
            if np.isfinite(lo) and np.isfinite(hi):
                step = 0.5 * (lo + hi)
            else:
                step = lo + max(1.0, abs(lo)) if np.isfinite(lo) else hi - max(1.0, abs(hi))
        if abs(step) > 1e4:
            return None
        s = step
    return None


def _cut(cgf: _WindowCgf, s: float, k_s: float, side: int, limit: int) -> int:
    """The end of the tilted window law's range on one side (``side`` +1: high, -1: low).

    Chernoff's bound for the law tilted by ``s``: ``P_s(side·M >= side·x) <= exp(K(s + side·t)
    - K(s) - side·t·x)`` for every ``t > 0``; at ``x = K'(s + side·t)`` it is ``exp(h(t))``
    below, which falls with ``t``. Returns such an ``x`` where the bound is at most
    ``_WINDOW_TAIL`` (rounded outwards), or ``limit`` (0 or the rows) when none is nearer.
    """
    log_tail = np.log(_WINDOW_TAIL)
    _, _, var = cgf(s)
    t = np.sqrt(-2.0 * log_tail / var) if var > 0 else 1.0
    lo, hi = 0.0, np.inf
    best: float | None = None
    for _ in range(100):
        k, mean, var = cgf(s + side * t)
        h = k - k_s - side * t * mean - log_tail
        if h <= 0:
            best, hi = mean, t
            if h > -5.0:
                break
        else:
            lo = t
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            step = t + h / (t * var)
        if not lo < step < hi:
            step = 0.5 * (lo + hi) if np.isfinite(hi) else 2.0 * t
        if step > 1e4:
            break
        t = step
    if best is None:
        return limit
    edge = int(np.ceil(best)) if side > 0 else int(np.floor(best))
    return min(edge, limit) if side > 0 else max(edge, limit)


def _tilted_pvalues(p: FloatArray, day_rows: NDArray[np.int64],
                    misses: int) -> tuple[float, float] | None:
    """``P(M >= misses)`` and ``P(M <= misses)`` by an exponentially tilted FFT convolution.

    With ``s`` the saddle point at ``misses``, ``P(M = x) = P_s(M = x) exp(K(s) - s x)``; the
    tilted law is centred on ``misses`` and computed by FFT on the range the Chernoff cuts leave
    (mass beyond: below 1e-18 a side, wrapped around the circular convolution), each day's
    tilted mixture of binomials kept where Bernstein's inequality leaves more than 1e-22 per
    node. The smaller tail is summed with the tilt undone (so its relative accuracy holds however
    small it is), the other is its complement. None when the law is degenerate (every row
    surely in, or surely out); the direct convolution then serves.
    """
    total = int(day_rows.sum())
    cgf = _WindowCgf(p, day_rows)
    s = _saddlepoint(cgf, min(max(float(misses), 0.5), total - 0.5))
    if s is None:
        return None
    k_s, _, _ = cgf(s)
    low, high = _cut(cgf, s, k_s, -1, 0), _cut(cgf, s, k_s, 1, total)
    size = scipy.fft.next_fast_len(high - low + 1, real=True)
    _, weights, q = cgf.tilt(s)
    z = cgf.logit + s
    # log q and log(1 - q); a node sure to miss (q = 1) or to cover (q = 0) has one value, k = n
    # or k = 0, and the other logarithm (-inf, multiplied by 0) is replaced by any finite number
    log_q = np.where(q > 0, -np.logaddexp(0.0, -z), 0.0)
    log_1mq = np.where(q < 1, -np.logaddexp(0.0, z), 0.0)
    log_fact = scipy.special.gammaln(np.arange(int(cgf.sizes.max()) + 1) + 1.0)
    spectrum = np.ones(size // 2 + 1, dtype=np.complex128)
    for n, count, w_day in zip(cgf.sizes.tolist(), cgf.counts.tolist(), weights, strict=True):
        keep = w_day > NODE_TAIL
        qk, log_wk = q[keep], np.log(w_day[keep])
        # Bernstein: P(|Bin(n, q) - nq| >= t) <= 2 exp(-t² / (2 (nq(1-q) + t/3))); a node of
        # weight w leaves out at most w times that, which is held below NODE_TAIL
        spread = log_wk + np.log(2.0 / NODE_TAIL)
        t = spread / 3.0 + np.sqrt(spread**2 / 9.0 + 2.0 * n * qk * (1.0 - qk) * spread)
        t = np.where((qk > 0) & (qk < 1), t, 0.0)
        first = np.clip(np.floor(n * qk - t), 0, n).astype(np.int64)
        last = np.clip(np.ceil(n * qk + t), 0, n).astype(np.int64)
        widths = last - first + 1
        node = np.repeat(np.arange(len(qk)), widths)
        k = np.arange(int(widths.sum())) - np.repeat(np.cumsum(widths) - widths - first, widths)
        log_pmf = (log_fact[n] - log_fact[k] - log_fact[n - k] + k * log_q[keep][node]
                   + (n - k) * log_1mq[keep][node] + log_wk[node])
        day = scipy.fft.rfft(np.bincount(k % size, np.exp(log_pmf), minlength=size))
        spectrum *= day if count == 1 else day ** int(count)
    wrapped = np.clip(scipy.fft.irfft(spectrum, size), 0.0, None)
    # the smaller tail, tilt undone: P(M = x) = P_s(M = x) exp(K(s) - s x), which only falls
    # away from ``misses`` on the side summed
    x = np.arange(misses, high + 1) if s >= 0 else np.arange(low, misses + 1)
    with np.errstate(divide="ignore"):
        pmf = np.exp(np.log(wrapped[x % size] / wrapped.sum()) + k_s - s * x)
    tail = float(pmf.sum())
    at = float(pmf[0] if s >= 0 else pmf[-1]) if low <= misses <= high else 0.0
    other = 1.0 - tail + at
    upper, lower = (tail, other) if s >= 0 else (other, tail)
    return min(upper, 1.0), min(lower, 1.0)


def window_rows(day_rows: ArrayLike, misses: int) -> NDArray[np.int64]:
    """The window's days with rows; refuses a miss count the rows cannot hold."""
    rows = np.asarray(day_rows, dtype=np.int64)
    rows = rows[rows > 0]
    total = int(rows.sum())
    if not 0 <= misses <= total:
        raise ValueError(f"misses ({misses}) must lie between 0 and the rows ({total})")
    return rows


def _miss_probabilities(tau2: float, sigma_w2: float, half_width: float,
                        scale: float) -> FloatArray:
    """The miss probability of a row, given the day's shock at each quadrature node."""
    x, _ = _hermite()
    tau, sw = np.sqrt(tau2) * scale, np.sqrt(sigma_w2) * scale
    shocks = np.sqrt(2.0) * tau * x
    if sw == 0:
        return (np.abs(shocks) > half_width).astype(np.float64)
    upper = tails.norm_sf((half_width - shocks) / sw)
    lower = tails.norm_cdf((-half_width - shocks) / sw)
    return np.clip(upper + lower, 0.0, 1.0)


@lru_cache(maxsize=1)
def _hermite() -> tuple[FloatArray, FloatArray]:
    return scipy.special.roots_hermite(SHOCK_NODES)


def shock_weights() -> FloatArray:
    """The quadrature weights of the shock nodes (they sum to one)."""
    return _shock_weights()


def shock_nodes() -> FloatArray:
    """The shock nodes in standard-normal units (``sqrt(2)`` times the Hermite roots)."""
    return np.sqrt(2.0) * _hermite()[0]


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
    def around(cls, tau2: float, sigma_w2: float, half_width: float,
               scales: tuple[float, float]) -> GuardedMissLaw:
        """The law at the spread scales ``(wide, narrow)`` of :func:`spread_scales` (or
        :func:`chi2_scales`)."""
        wide, narrow = scales
        return cls(MissLaw(tau2, sigma_w2, half_width, wide),
                   MissLaw(tau2, sigma_w2, half_width, narrow))

    def test(self, day_rows: ArrayLike, covered: int, target: float, dispersion: float = 1.0,
             level: float = 0.95) -> CoverageTest:
        low = self.wide.test(day_rows, covered, target, dispersion, level)
        high = self.narrow.test(day_rows, covered, target, dispersion, level)
        return replace(low, pvalue_high=high.pvalue_high)


MIN_NARROW = 0.05  # the narrow scale's floor (a lower bound of zero spread tests nothing)


def spread_scales(effects: DayEffects, guarantee: float, persistence: float = 0.0
                  ) -> tuple[float, float]:
    """``(wide, narrow)``: the true total spread ``sqrt(tau² + sigma_w²)`` is at most ``wide``
    times its estimate, and at least ``narrow`` times it, each with probability ``guarantee``.

    The total variance is a positive combination of the ANOVA mean squares,
    ``theta = E[MSB]/n0 + (1 - 1/n0) E[MSW]``, with ``MSB`` on ``G - 1`` and ``MSW`` on ``N - G``
    degrees of freedom. Its one-sided bounds are the modified large-sample bounds of Graybill &
    Wang (1980, *JASA* 75, 869-873; Burdick & Graybill 1992, *Confidence Intervals on Variance
    Components*, §3.2; from memory): with ``c = (1/n0, 1 - 1/n0)``, ``S = (MSB, MSW)``,

        U = theta_hat + sqrt(Σ (c_q S_q H_q)²),   H_q = df_q / χ²_{1-g}(df_q) - 1,
        L = theta_hat - sqrt(Σ (c_q S_q G_q)²),   G_q = 1 - df_q / χ²_{g}(df_q),

    exact for a single mean square and close to the nominal level otherwise (checked by
    simulation in tests/stats/test_misses.py). A bound computed from a normal law of the log of
    the estimate, with its sd itself estimated, held only about 88 % instead of 95 % for two
    weeks of days: an underestimated day-to-day spread also underestimates its own
    uncertainty. ``persistence``: the lag-1 correlation of the day shocks, which leaves fewer
    independent days behind ``MSB`` (``df (1 - phi²)/(1 + phi²)``, Bartlett 1946, from memory).
    """
    if not 0 < guarantee < 1:
        raise ValueError(f"the guarantee is a probability in (0, 1); got {guarantee}")
    g, n = effects.n_days, effects.n_rows
    theta = effects.tau2 + effects.sigma_w2
    if g < 2 or n <= g or theta <= 0:
        return 1.0, 1.0
    n0 = effects.n0
    phi2 = min(max(persistence, 0.0), 0.99) ** 2
    df = np.array([(g - 1) * (1 - phi2) / (1 + phi2), float(n - g)])
    parts = np.array([effects.ms_between / n0, (1 - 1 / n0) * effects.ms_within])
    high = df / tails.chi2_ppf(1 - guarantee, df) - 1
    low = 1 - df / tails.chi2_ppf(guarantee, df)
    upper = theta + float(np.sqrt(np.sum((parts * high) ** 2)))
    lower = theta - float(np.sqrt(np.sum((parts * low) ** 2)))
    return float(np.sqrt(upper / theta)), float(np.sqrt(max(lower / theta, MIN_NARROW**2)))


def chi2_scales(dof: float, guarantee: float) -> tuple[float, float]:
    """``(wide, narrow)`` of :func:`spread_scales` for a spread estimated from ``dof``
    independent rows alone: the chi-square bounds of a variance (``s² dof / σ² ~ χ²(dof)``)."""
    if not 0 < guarantee < 1:
        raise ValueError(f"the guarantee is a probability in (0, 1); got {guarantee}")
    if not dof > 0:
        return 1.0, 1.0
    return (float(np.sqrt(dof / tails.chi2_ppf(1 - guarantee, dof))),
            float(np.sqrt(dof / tails.chi2_ppf(guarantee, dof))))
