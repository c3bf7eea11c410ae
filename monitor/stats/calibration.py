"""The bias CUSUM's day standardization, and a decision interval ``h`` that keeps its promise
when the chart's parameters are estimated.

The nightly chart steps once per day on ``u_d = rbar_d / D_d``, where ``rbar_d`` is the day's mean
residual against the active coefficients and

    D_d² = tau² + sigma_w² / n_d + x~_dᵀ V x~_d,      x~_d = (1, xbar_d - xbar),

the variance of a day mean under the random-day-effect model ``e = a_day + w`` (tau², sigma_w²:
:mod:`monitor.stats.day_effects`) plus the coefficients' own uncertainty ``V``. Coefficients are
kept in the centred parameterization ``theta = (intercept at the fit mean xbar, slopes)``, in
which ``X~ᵀX~ = blockdiag(N, Mxx)``. The covariance of the OLS coefficients under day effects is
the sandwich

    V = A⁻¹ (tau² B + sigma_w² A) A⁻¹,   A = X~ᵀX~,   B = Σ_i n_i² x~_i x~_iᵀ

(Moulton 1986, *J. Econometrics* 32, 385-397, from memory: OLS with a random group effect;
``B`` is ``X~ᵀ Z Zᵀ X~`` for the day-indicator matrix ``Z``).

Estimation error alone can halve the in-control run length of a chart whose ``h`` is chosen as if
the estimates were the truth. :func:`calibrate_h` therefore follows Gandy & Kvaløy (2013,
"Guaranteed conditional performance of control charts via bootstrap methods", *Scand. J.
Statist.* 40, 647-668): a parametric bootstrap redraws the estimates with the fitted values as the
truth, finds for each draw the ``h`` that gives the target ARL to a chart built from the redrawn
estimates, and takes the ``guarantee`` quantile of those ``h``. The chart then reaches the target
with probability about ``guarantee`` over the randomness of its own fit window.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray

from monitor.errors import DegenerateDataError
from monitor.stats import tails
from monitor.stats.arl import cusum_arl, solve_h, solve_h_many
from monitor.stats.day_effects import net_of_rhythm
from monitor.stats.moments import DayMoments
from monitor.stats.ols import OLSFit
from monitor.stats.window_summary import (
    MAX_PERSISTENCE,
    PERSISTENCE_ALPHA,
    DayEffects,
    FitDiagnosis,
)

FloatArray = NDArray[np.float64]
_TINY = 1e-20  # residual variance, relative to the response's, below which a fit is exact


@dataclass(frozen=True, eq=False)
class ChartDesign:
    """What the bias chart needs from its fit window: day sizes, day positions, variances.

    ``rows[i] = (1, xbar_i - xmean)`` for training day ``i`` (days without rows dropped),
    ``a = X~ᵀX~ = blockdiag(N, Mxx)`` and ``b = Σ n_i² x~_i x~_iᵀ`` in the centred
    parameterization; ``a_inv`` and ``sandwich = A⁻¹ B A⁻¹`` are derived.
    """

    counts: FloatArray
    rows: FloatArray
    a: FloatArray
    b: FloatArray
    xmean: FloatArray
    tau2: float
    sigma_w2: float
    n0: float
    n_rows: int
    n_days: int
    phi: float = 0.0  # lag-1 correlation of the chart's standardized day means (prewhitened)
    phi_true: float = 0.0  # the persistence the bootstrap takes as the truth
    a_inv: FloatArray = field(init=False, repr=False)
    sandwich: FloatArray = field(init=False, repr=False)

    def __post_init__(self) -> None:
        for name in ("counts", "rows", "a", "b", "xmean"):
            arr = np.array(getattr(self, name), dtype=np.float64)
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)
        for name in ("tau2", "sigma_w2", "n0", "phi", "phi_true"):
            object.__setattr__(self, name, float(getattr(self, name)))
        if not (self.tau2 >= 0 and self.sigma_w2 >= 0 and self.tau2 + self.sigma_w2 > 0
                and np.isfinite(self.tau2 + self.sigma_w2)):
            raise DegenerateDataError(
                f"the residual variances (tau² = {self.tau2:g}, sigma_w² = {self.sigma_w2:g}) "
                "leave nothing to standardize by; the fit window's residuals are all zero"
            )
        a_inv = np.linalg.inv(self.a)
        a_inv = 0.5 * (a_inv + a_inv.T)
        sandwich = a_inv @ self.b @ a_inv
        for name, arr in (("a_inv", a_inv), ("sandwich", 0.5 * (sandwich + sandwich.T))):
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)

    @property
    def p(self) -> int:
        return self.rows.shape[1]

    @classmethod
    def from_fit(cls, fit: OLSFit, days: DayMoments, effects: DayEffects,
                 persistence: Persistence | None = None) -> ChartDesign:
        """The design of ``fit``'s window: ``days`` are that window's day statistics.

        With ``persistence`` (the fit window's lag-1 correlation of standardized day means) the
        day shocks are taken as AR(1) over the days with rows: ``B`` weighs day pairs by the
        shocks' correlation ``phi_a^|i-j|`` (Moulton's sandwich with serially correlated group
        effects), and the chart prewhitens with ``persistence.chart``.
        """
        k = fit.k
        if days.dim != k + 1:
            raise ValueError(f"day statistics over {days.dim} columns for a fit with {k} "
                             "predictors (expected predictors and the response)")
        keep = np.asarray(days.n) > 0
        counts = np.asarray(days.n, dtype=np.float64)[keep]
        n_rows, n_days = int(counts.sum()), int(keep.sum())
        if n_rows != fit.n:
            raise ValueError(f"the day statistics hold {n_rows} rows but the fit used {fit.n}; "
                             "pass the fit window's days")
        rows = np.column_stack([np.ones(n_days), days.mean[keep, :k] - fit.xmean])
        a = np.zeros((k + 1, k + 1))
        a[0, 0] = n_rows
        mxx = np.linalg.inv(fit.slope_inverse)
        a[1:, 1:] = 0.5 * (mxx + mxx.T)
        phi_a = shock_persistence(persistence.truth if persistence else 0.0, effects.tau2,
                                  effects.sigma_w2, counts)
        weighted = counts[:, None] * rows
        lag = np.abs(np.subtract.outer(np.arange(n_days), np.arange(n_days)))
        b = weighted.T @ (phi_a**lag) @ weighted
        if effects.tau2 + effects.sigma_w2 <= _TINY * fit.tss / fit.n:
            raise DegenerateDataError(
                "the fit window's residuals are (almost) all zero, so the bias chart has no "
                "scale to standardize by; check the data (a copied column as the response?)"
            )
        return cls(counts=counts, rows=rows, a=a, b=b, xmean=fit.xmean, tau2=effects.tau2,
                   sigma_w2=effects.sigma_w2, n0=effects.n0, n_rows=n_rows, n_days=n_days,
                   phi=persistence.chart if persistence else 0.0,
                   phi_true=persistence.truth if persistence else 0.0)


def chart_design(fit: OLSFit, days: DayMoments, effects: DayEffects,
                 diagnosis: FitDiagnosis | None) -> ChartDesign:
    """The bias chart's design of a version: its fit window's persistence, and the day shocks
    net of a weekly rhythm when the fit window showed one without persistence (the chart
    subtracts the rhythm whenever there is one)."""
    rhythm = diagnosis.rhythm() if diagnosis is not None else None
    if rhythm is not None and diagnosis is not None and diagnosis.chart_persistence() == 0:
        # with persistent shocks the weekday means carry the shocks' runs too, and the share
        # the rhythm explains is overstated: the day shocks keep their full variance then
        # (the chart still subtracts the offsets, which only makes it more cautious)
        effects = net_of_rhythm(effects, rhythm, diagnosis.weekday_days)
    return ChartDesign.from_fit(fit, days, effects, Persistence.of(diagnosis))


@dataclass(frozen=True)
class Persistence:
    """Day-to-day persistence as the bias chart sees it.

    ``estimate`` is the fit window's lag-1 autocorrelation ``r1`` of the standardized day means;
    ``chart`` the correlation the chart prewhitens with (``r1`` when significant, else 0:
    :meth:`monitor.stats.window_summary.FitDiagnosis.chart_persistence`); ``truth`` the value the
    bootstrap takes as the truth: ``r1`` corrected for its small-sample bias ``-(1 + 4 phi)/G``
    (Kendall 1954, from memory), kept in ``[0, MAX]``, so a persistence too weak to be
    significant still widens the limit a little rather than being taken as none.
    """

    estimate: float
    chart: float
    days: int

    @classmethod
    def of(cls, diagnosis: FitDiagnosis | None) -> Persistence | None:
        """What the chart takes from a fit window's diagnosis (None when there is none)."""
        if diagnosis is None:
            return None
        return cls(diagnosis.persistence, diagnosis.chart_persistence(), diagnosis.days)

    @property
    def truth(self) -> float:
        if not np.isfinite(self.estimate) or self.days < 3:
            return 0.0
        return float(np.clip(self.estimate + (1 + 4 * self.estimate) / self.days, 0.0,
                             MAX_PERSISTENCE))


def shock_persistence(phi_u: float, tau2: float, sigma_w2: float, counts: FloatArray) -> float:
    """The day shocks' own lag-1 correlation behind ``phi_u`` on standardized day means:
    ``phi_u · mean(tau² + sigma_w²/n) / tau²`` (the within-day noise does not persist)."""
    if phi_u <= 0 or tau2 <= 0 or len(counts) == 0:
        return 0.0
    d2 = float(np.mean(tau2 + sigma_w2 / counts))
    return float(min(phi_u * d2 / tau2, MAX_PERSISTENCE))


def prewhiten(u: float, previous: float | None, phi: float) -> float:
    """The chart's step for a day with standardized mean ``u``: the standardized one-step
    prediction error ``(u - phi u_prev) / sqrt(1 - phi²)`` of an AR(1) model of the day
    means (Alwan & Roberts 1988, *J. Bus. Econ. Statist.* 6, 87-95); ``u`` itself on the first
    day of a run or when ``phi = 0``."""
    if phi == 0.0 or previous is None or not np.isfinite(previous):
        return u
    return (u - phi * previous) / float(np.sqrt(1.0 - phi**2))


def coef_covariance(design: ChartDesign, tau2: ArrayLike, sigma_w2: ArrayLike) -> FloatArray:
    """``A⁻¹ (tau² B + sigma_w² A) A⁻¹`` (Moulton 1986), centred parameterization.

    Broadcasts over arrays of ``tau2`` and ``sigma_w2``: the result has shape ``(..., p, p)``.
    """
    t = np.asarray(tau2, dtype=np.float64)[..., None, None]
    s = np.asarray(sigma_w2, dtype=np.float64)[..., None, None]
    return t * design.sandwich + s * design.a_inv


def standardize_days(resid_means: ArrayLike, counts: ArrayLike, day_mean_x: ArrayLike,
                     design: ChartDesign) -> FloatArray:
    """``u_d = rbar_d / D_d`` for days with mean residual ``rbar_d``, ``n_d`` rows and mean
    predictors ``xbar_d``; ``D_d`` as in the module text with the design's tau², sigma_w².

    Days with ``n_d = 0`` give NaN: the chart skips them (they are not degenerate, only empty).
    """
    r = np.asarray(resid_means, dtype=np.float64).ravel()
    n = np.asarray(counts, dtype=np.float64).ravel()
    rows = _centred_rows(day_mean_x, design, len(r))
    if n.shape != r.shape:
        raise ValueError("one count per day is needed")
    v = coef_covariance(design, design.tau2, design.sigma_w2)
    with np.errstate(divide="ignore", invalid="ignore"):
        d2 = design.tau2 + design.sigma_w2 / n + np.einsum("dj,jk,dk->d", rows, v, rows)
        u = r / np.sqrt(d2)
    return np.where(n > 0, u, np.nan)


@dataclass(frozen=True, eq=False)
class Calibration:
    """The decision interval of the bias chart and what it promises.

    ``h`` is the ``guarantee`` quantile of the bootstrap draws ``h_draws``; ``h_known`` the
    interval that would give ``target_arl`` if the estimates were exact, and ``arl_known`` the ARL
    that ``h`` gives under exact estimates. ``calibrated`` is False when the fit window is too
    small to bootstrap (then ``h = h_known``, ``draws = 0`` and ``reason`` says why).
    """

    h: float
    h_known: float
    arl_known: float
    k: float
    target_arl: float
    guarantee: float
    draws: int
    seed: int
    calibrated: bool
    h_draws: FloatArray = field(repr=False)
    reason: str = ""
    learn_until: int = 0  # self-starting: the chart learns the level until this many days


def calibrate_chart(design: ChartDesign, k: float, target_arl: float, guarantee: float,
                    learn_until: int) -> Calibration:
    """The bias chart's limit: bootstrap-calibrated (:func:`calibrate_h`) for a version fitted
    on at least ``learn_until`` days; for a shorter fit window, the limit of a self-starting
    chart (:func:`self_starting`)."""
    if self_starts(design, learn_until):
        return self_starting(k, target_arl, guarantee, learn_until)
    return calibrate_h(design, k=k, target_arl=target_arl, guarantee=guarantee)


def self_starts(design: ChartDesign, learn_until: int) -> bool:
    """Whether a version with this design learns its level: fitted on fewer than
    ``learn_until`` days with rows and without persistent day shocks (Quesenberry's Q values are
    independent only for independent days; with persistence the bootstrap limit, which allows
    for it, is used as for any window)."""
    return design.n_days < learn_until and design.phi == 0.0


@lru_cache(maxsize=512)
def frozen_limit(k: float, target_arl: float, guarantee: float, days: int, draws: int = 400,
                 seed: int = 20240611) -> float:
    """The limit of a chart whose level and day sd were estimated from ``days`` day means and
    then frozen: the ``guarantee`` quantile of the limits that keep the target ARL over
    redrawn estimates (Gandy & Kvaløy 2013, as :func:`calibrate_h`), the level off by
    ``N(0, 1/days)`` and the sd by ``chi²(days - 1)/(days - 1)`` (normal day means); inf when
    the estimates are too loose for any limit."""
    if days < 3:
        return float("inf")
    rng = np.random.default_rng(seed)
    level = rng.standard_normal(draws) / np.sqrt(days)
    scale = np.sqrt((days - 1) / rng.chisquare(days - 1, draws))  # true sd / estimated sd
    h = solve_h_many(k, target_arl, level * scale, scale)
    with np.errstate(invalid="ignore"):
        return float(np.quantile(h, guarantee))


def self_starting(k: float, target_arl: float, guarantee: float,
                  learn_until: int) -> Calibration:
    """The limit of a self-starting chart (Hawkins 1987, "Self-starting CUSUM charts for
    location and scale", *The Statistician* 36, 299-316; Quesenberry 1991, "SPC Q charts for
    start-up processes and short or long runs", *J. Quality Technology* 23, 213-224): each
    day's mean residual is standardized by the mean and sd of every earlier in-control day
    (the fit window's and the monitored ones learned so far) and turned into an exactly
    standard normal value through its t law, so the chart's run lengths are those of known
    parameters: ``h`` is the known-parameter limit, with nothing to guarantee."""
    h = solve_h(k, target_arl)
    return Calibration(h=h, h_known=h, arl_known=float(cusum_arl(k, h)), k=float(k),
                       target_arl=float(target_arl), guarantee=guarantee, draws=0, seed=0,
                       calibrated=True, h_draws=np.zeros(0),
                       reason=f"self-starting until {learn_until} days", learn_until=learn_until)


def calibrate_h(design: ChartDesign, k: float = 0.5, target_arl: float = 1000.0,
                guarantee: float = 0.90, draws: int = 400, seed: int = 20240611) -> Calibration:
    """Decision interval ``h`` such that ``P(in-control ARL >= target_arl) ≈ guarantee``.

    Parametric bootstrap of Gandy & Kvaløy (2013) with the fitted values as the truth; each
    draw's in-control ``u`` is approximated by i.i.d. normal values with the mean and variance
    of the mixture over the training days (see :func:`_bootstrap_moments`).
    """
    if not 0.0 < guarantee < 1.0:
        raise ValueError(f"the guarantee is a probability strictly between 0 and 1; "
                         f"got {guarantee}")
    if draws < 1:
        raise ValueError(f"the bootstrap needs at least one draw; got {draws}")
    h_known = solve_h(k, target_arl)
    small = _too_small(design)
    if small:
        return Calibration(h=h_known, h_known=h_known, arl_known=float(cusum_arl(k, h_known)),
                           k=float(k), target_arl=float(target_arl), guarantee=guarantee,
                           draws=0, seed=seed, calibrated=False, h_draws=np.zeros(0),
                           reason=small)
    mean, sd = _bootstrap_moments(design, draws, np.random.default_rng(seed))
    h_draws = solve_h_many(k, target_arl, mean, sd)
    with np.errstate(invalid="ignore"):  # draws with no finite h are +inf; inf - inf is nan
        h = float(np.quantile(h_draws, guarantee))
    if not np.isfinite(h):
        raise DegenerateDataError(
            f"no decision interval gives an in-control ARL of {target_arl:g} days with "
            f"probability {guarantee:g}: the fit window ({design.n_days} days) pins the model "
            "down too loosely; fit on a longer window"
        )
    h_draws.setflags(write=False)
    return Calibration(h=h, h_known=h_known, arl_known=float(cusum_arl(k, h)), k=float(k),
                       target_arl=float(target_arl), guarantee=guarantee, draws=draws, seed=seed,
                       calibrated=True, h_draws=h_draws)


def _bootstrap_moments(design: ChartDesign, draws: int,
                      rng: np.random.Generator) -> tuple[FloatArray, FloatArray]:
    """Mean and sd of the in-control ``u`` seen by ``draws`` charts built from redrawn estimates.

    With the fitted values as the truth (Gandy & Kvaløy 2013, parametric bootstrap):
    ``delta* ~ N(0, V(tau², sigma_w²))``; ``sigma_w*² = sigma_w² χ²(N-G)/(N-G)``;
    ``MSB* = (sigma_w² + n0 tau²) χ²(G-1)/(G-1)``; ``tau*² = max(0, (MSB* - sigma_w*²)/n0)``
    (the ANOVA estimators' sampling laws under normality, Searle, Casella & McCulloch 1992, §3.5).
    On a future day like training day ``i`` the chart sees ``u_i ~ N(mu_i, w_i²)`` with
    ``mu_i = -x~_iᵀ delta* / D*_i`` and ``w_i² = (tau² + sigma_w²/n_i) / D*_i²``; the returned
    moments are those of the equal-weight mixture over training days, each of shape ``(draws,)``.
    """
    tau2, sw2, n0 = design.tau2, design.sigma_w2, design.n0
    g, big_n = design.n_days, design.n_rows
    values, vectors = np.linalg.eigh(coef_covariance(design, tau2, sw2))
    root = vectors * np.sqrt(np.maximum(values, 0.0))  # root @ root.T = V, also when singular
    delta = rng.standard_normal((draws, design.p)) @ root.T
    sw2_star = sw2 * rng.chisquare(big_n - g, draws) / (big_n - g)
    phi_a = shock_persistence(design.phi_true, tau2, sw2, design.counts)
    df_b = max((g - 1) * (1 - phi_a**2) / (1 + phi_a**2), 1.0)
    msb_star = (sw2 + n0 * tau2) * rng.chisquare(df_b, draws) / df_b
    tau2_star = np.maximum(0.0, (msb_star - sw2_star) / n0)
    rows, n = design.rows, design.counts
    lev_sandwich = np.einsum("ij,jk,ik->i", rows, design.sandwich, rows)
    lev_plain = np.einsum("ij,jk,ik->i", rows, design.a_inv, rows)
    d2 = (tau2_star[:, None] * (1.0 + lev_sandwich) + sw2_star[:, None] * (1.0 / n + lev_plain))
    mu = -(delta @ rows.T) / np.sqrt(d2)
    w2 = (tau2 + sw2 / n) / d2
    gain, lrv = _prewhitening(design, draws, rng)
    mu = mu * gain[:, None]
    w2 = w2 * lrv[:, None]
    mean = mu.mean(axis=1)
    var = (w2 + mu**2).mean(axis=1) - mean**2
    return mean, np.sqrt(var)


def _prewhitening(design: ChartDesign, draws: int,
                  rng: np.random.Generator) -> tuple[FloatArray, FloatArray]:
    """Per draw: the factor a prewhitened chart applies to a steady bias, and the long-run
    variance of its steps relative to independent days.

    The redrawn chart estimates ``phi* ~ N(phi, (1 - phi²)/G)`` (the large-sample law of
    ``r1``; Bartlett 1946, from memory) and prewhitens with it when ``|phi*| sqrt(G)`` exceeds
    the two-sided normal quantile of the persistence test's level (an approximation of the
    Ljung–Box decision the fit makes). On standardized day means that are AR(1) with ``phi``
    its steps ``(u_t - c u_t-1)/sqrt(1 - c²)`` have spectral density at zero
    ``(1 - c)(1 + phi) / ((1 - phi)(1 + c))`` times that of independent days; the chart's run
    lengths follow the long-run variance of its steps (for a CUSUM of a stationary sequence,
    common practice, no source), which is what this factor carries into the bootstrap.
    """
    phi = design.phi_true
    if phi <= 0 and design.phi == 0:
        return np.ones(draws), np.ones(draws)
    g = max(design.n_days, 3)
    star = phi + np.sqrt((1 - phi**2) / g) * rng.standard_normal(draws)
    cut = float(tails.norm_ppf(1 - PERSISTENCE_ALPHA / 2)) / np.sqrt(g)
    used = np.where(star > cut, np.minimum(star, MAX_PERSISTENCE), 0.0)
    gain = (1 - used) / np.sqrt(1 - used**2)
    lrv = (1 - used) * (1 + phi) / ((1 - phi) * (1 + used))
    return gain, lrv


def _centred_rows(day_mean_x: ArrayLike, design: ChartDesign, count: int) -> FloatArray:
    x = np.asarray(day_mean_x, dtype=np.float64)
    k = design.p - 1
    if x.ndim <= 1:
        x = x.reshape(count, k)
    if x.shape != (count, k):
        raise ValueError(f"expected mean predictors of shape ({count}, {k})")
    return np.column_stack([np.ones(count), x - design.xmean])


def _too_small(design: ChartDesign) -> str:
    if design.n_days < 3:
        return f"{design.n_days} days in the fit window; the bootstrap needs at least 3"
    if design.n_rows - design.n_days < 2:
        return (f"{design.n_rows} rows on {design.n_days} days leave fewer than 2 degrees of "
                "freedom within days; the bootstrap needs more rows per day")
    return ""
