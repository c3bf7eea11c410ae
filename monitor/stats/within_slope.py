"""The within-day slope chart: slope evidence that no day shock, rhythm or level shift can hide.

Each day's centred co-moments give the day's own least-squares slopes

    b_d = Sxx_d⁻¹ Sxy_d,      Sxx_d, Sxy_d: the day's centred cross-products,

the slopes of the rows of that day around that day's own means. A day shock, a weekday offset or
a level shift moves every row of the day alike and leaves ``b_d`` untouched, so the chart below
measures a change of slope against the within-day noise only, however large the day-to-day
variation is. Under the version, ``b_d - beta`` has variance

    v_dj = c_j · sigma_w² · (Sxx_d⁻¹)_jj + tau_j²

for predictor ``j``: ``sigma_w²`` the within-day residual variance of the fit window,
``c_j`` the ratio of White's (1980, *Econometrica* 48, 817-838) heteroscedasticity-consistent
"meat" (of rows guarded as below) to the classical one in the fit window (1 for normal rows
whose scatter does not change with the predictors), and ``tau_j²`` the between-day variance
of the day slopes, estimated from the fit window by the moment estimator of DerSimonian & Laird
(1986, *Controlled Clinical Trials* 7, 177-188), for days whose slope wanders around the line.
``tau_j²`` is estimated from the fit window's day slopes of rows guarded as below, the slopes the
chart itself sees (:func:`monitor.stats.diagnosis.guarded_between_day_variance`); versions stored
before estimate it from the raw day slopes, with the raw rows' White ratio (see
:func:`design_slope_chart`).

The chart is the log-likelihood-ratio CUSUM of Page (1954) for a step ``delta_j`` (a share of
the slope, 10 % by default) in each direction, on the day's standardized deviation
``z = (b_dj - beta_j) / sqrt(v_dj)`` with the day's standardized step ``lambda = delta_j /
sqrt(v_dj)``:

    S+ = max(0, S+ + lambda (z - lambda/2)),   S- = max(0, S- + lambda (-z - lambda/2)).

A day with many rows spread over a wide range of ``x`` has a large ``lambda`` and counts much; a
day with little spread in ``x`` has a small one and counts little, and a day whose ``lambda`` is
below :data:`MIN_STEP` does not step the chart at all. ``z`` is clipped to
``±max(Z_CLIP, lambda + 3)`` so one wild row on a thin day cannot carry the chart alone (a
winsorized CUSUM in the spirit of Lucas & Crosier 1982, *Technometrics* 24; clipping shortens
the in-control excursions, so the run lengths below are lower bounds). A day's rows beyond 4
robust sd of its line are left out before its slope is taken (:func:`slope_step`; versions
fitted before that rule clip them instead), and the reference ``beta`` is the fit window's
within slope of rows guarded the same way: on rows with a long right tail whose scatter grows
with a predictor, the guard takes more off where the predictor is large, and against the raw
slope every day would read low (on the skewed rows of ``tests/stats/test_within_slope.py``, by
2.0 % of the slope with clipped rows and 4.2 % with rows left out; at 400 rows a day 2 % is
about one day's sd).

A chart can run in two *lanes* per predictor, each its own pair of sides with its own step:
the main lane tuned to ``delta`` (a 10 % step by default) and a second lane tuned to a smaller
step (5 % by default). A likelihood-ratio CUSUM is most sensitive to the step it is tuned to
(Moustakides 1986, *Annals of Statistics* 14, 1379-1387): the main lane flags a 10-20 % step in a
day or two, the small lane accumulates evidence of a step of a few per cent, or a slow drift, that
stays below the main lane's reference value ``lambda/2`` day after day. The false-alarm budget is
shared: each of the ``L`` two-sided lane charts gets ``L`` times the target ARL (Bonferroni on
the rates; the lanes watch the same days and move together, so the union's ARL is longer).

**A reference that learns.** By default the reference slope is not frozen at the fit window's
estimate: it keeps learning from the version's own in-control days, the fit window's slope
``beta_0`` (variance ``se_0²``) and each learned day's slope combined with inverse-variance
weights,

    beta_t = (W_0 beta_0 + Σ w_d b_d) / (W_0 + Σ w_d),   W_0 = 1/se_0²,  w_d = 1/v_d,

and each new day is standardized against the reference as it stood the day before,
``z = (b_d - beta_t) / sqrt(v_d + 1/(W_0 + Σ w_d))``. These are the recursive residuals of a
precision-weighted mean (Brown, Durbin & Evans 1975, *JRSS B* 37, 149-192, for the regression
case): with normal day slopes of known variance they are independent and exactly standard
normal, whatever the fit window's length, so the chart has the run lengths of a known
reference and its limit need not pay for the reference's estimation error (the self-starting
idea of Hawkins 1987 for the mean). A day is learned only while every lane stands below the
watch line, and learning stops at a ``refit`` (until it is acknowledged), so a change is not
learned into the reference. A change too small to lift the chart to its watch line within a
day or two would still be learned, bit by bit, and into a reference that knows only a few weeks
it is absorbed fast (a version fitted on two weeks let a second 5 % change pass for 100 days that
way). So for a version fitted on fewer than ``learn_until_days`` days a day is held back until
``slope_learn_delay_days`` later days with slopes have passed below the watch line, and a sign
of change drops the days held: such a change meets a reference that knows nothing of it for that
many days. The price is that days within the delay share the reference's error, so their
values are no longer exactly independent; measured in-control rates stay as without the delay
for such versions, while on a 60-day fit with four lanes the delay raised the slope chart's
false refits from 3 to 7 in 20 000 model-days, which is why longer fits learn each day at once
(``tests/benchmarks/results/departures_delay.md``). With ``fixed`` the reference is the fit
window's slope for good and the limit is guarded as below.

The decision interval ``H`` is found from the exact in-control run length of this chart
(Page's integral equation with the mixture of the fit days' step laws as the kernel, solved by
Nyström's method as in :mod:`monitor.stats.arl`), with the estimation error of the reference
counted as the bias chart counts it (Gandy & Kvaløy 2013): the chart must keep its in-control
ARL when the reference slope is off by the ``(1 + guarantee)/2`` quantile of its sampling law and
the variances are underestimated by their ``guarantee`` quantile (a learning reference drops
the first of these, for the reason above). With ``k`` predictors and ``m``
lanes each of the ``L = m k`` two-sided charts gets ``L`` times the target ARL, so their false
alarms add up to at most the target's.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy
from numpy.typing import ArrayLike, NDArray

from monitor.stats import tails
from monitor.stats.diagnosis import between_day_variance
from monitor.stats.moments import DayMoments, Moments, day_slopes
from monitor.stats.window_summary import TAIL_SDS

FloatArray = NDArray[np.float64]
MIN_STEP = 0.25 # days whose standardized step is below this do not move the chart
ROW_CLIP = TAIL_SDS  # rows beyond this many robust sd are guarded before a day's slope
MIN_INFLATION = 0.25  # the smallest ratio of the slope's variance to the classical one used
Z_CLIP = 4.0  # a day's standardized deviation is clipped to ±max(Z_CLIP, lambda + 3)
MIXTURE_DAYS = 16  # fit days kept (as quantiles of the step) in the run-length kernel
MAX_H = 40.0  # a chart that needs a larger interval is not run (its steps are too small)
_ROOT_2PI = np.sqrt(2.0 * np.pi)


def within_fit(days: DayMoments) -> tuple[FloatArray, float, int]:
    """The pooled within-day slopes of ``days``, their residual variance and its df.

    ``beta_w = (Σ Sxx_d)⁻¹ Σ Sxy_d`` (the fixed-effects, or "within", estimator: the line fitted
    with one intercept per day) and ``sigma_w² = Σ_d (Syy_d - 2 beta'Sxy_d + beta'Sxx_d beta) /
    (N - G - k)`` (Baltagi, *Econometric Analysis of Panel Data*, ch. 2, from memory).
    """
    keep = np.asarray(days.n) > 0
    c = np.asarray(days.comoment)[keep]
    k = days.dim - 1
    sxx, sxy, syy = c[:, :k, :k].sum(axis=0), c[:, :k, k].sum(axis=0), c[:, k, k].sum()
    beta = np.linalg.solve(sxx, sxy)
    dof = int(np.asarray(days.n)[keep].sum()) - int(keep.sum()) - k
    rss = float(syy - 2 * beta @ sxy + beta @ sxx @ beta)
    return beta, max(rss, 0.0) / max(dof, 1), dof


@dataclass(frozen=True, eq=False)
class SlopeChartDesign:
    """What the within-day slope chart needs from its fit window, and its decision interval."""

    slopes: FloatArray  # the reference: the fit window's within-day slopes (of guarded rows)
    sigma_w2: float  # within-day residual variance
    row_scale: float  # a robust sd of the rows around their day's line (the guard's unit)
    inflation: FloatArray  # c_j, White's meat over the classical one (>= 1)
    tau2: FloatArray  # between-day variance of each day slope
    target: FloatArray  # each lane's step (response units per unit x of its predictor)
    reference_se: FloatArray  # sd of the reference slopes' estimation error
    h: FloatArray  # each lane's decision interval (log-likelihood-ratio units; inf: none)
    target_arl: float
    guarantee: float
    fit_days: int
    fit_steps: FloatArray = field(repr=False)  # lambda of the fit days (days, L), NaN if unused
    lane_predictor: NDArray[np.intp] = field(  # each lane's predictor (0-based)
        default_factory=lambda: np.zeros(0, dtype=np.intp))
    learns: bool = False  # the reference learns from in-control days (recursive residuals)
    clip_shift: FloatArray = field(  # reference minus the raw within slopes (the guard's gap)
        default_factory=lambda: np.zeros(0))
    row_rule: str = "clip"  # rows beyond ROW_CLIP robust sd: "drop" (left out) or "clip"

    def __post_init__(self) -> None:
        if len(self.lane_predictor) == 0:  # one lane per predictor
            object.__setattr__(self, "lane_predictor", np.arange(len(self.slopes)))

    @property
    def k(self) -> int:
        return len(self.slopes)

    @property
    def raw_slopes(self) -> FloatArray:
        """The fit window's within slopes of the rows as they are: the line a day's rows are
        guarded around (so that the guard matches the fit window's)."""
        return self.slopes - self.clip_shift if len(self.clip_shift) == self.k else self.slopes

    @property
    def lanes(self) -> int:
        return len(self.lane_predictor)

    @property
    def reference_weight(self) -> FloatArray:
        """``W_0``: the fit window's reference slopes' precision."""
        with np.errstate(divide="ignore"):
            return 1.0 / self.reference_se**2

    def variance(self, unit: FloatArray) -> FloatArray:
        """``v_dj`` for days with unit variances ``unit`` (``(G, k)``)."""
        return self.inflation * self.sigma_w2 * unit + self.tau2


@dataclass(frozen=True)
class SlopeStep:
    """One day's step of the within-day slope chart (NaN where it did not step)."""

    z: tuple[float, ...]  # standardized deviation of the day's slope, per predictor
    step: tuple[float, ...]  # lambda, the day's standardized target step, per lane
    deviation: tuple[float, ...]  # b_dj - beta_j, response units per unit x, per predictor
    lanes: tuple[int, ...] = ()  # each lane's predictor (empty: one lane per predictor)
    variance: tuple[float, ...] = ()  # v_dj, the deviation's variance, per predictor

    def predictor(self, lane: int) -> int:
        return self.lanes[lane] if self.lanes else lane


def design_slope_chart(days: DayMoments, inflation: ArrayLike | None, shift: float,
                       target_arl: float, guarantee: float, *,
                       row_scale: float | None = None,
                       h: FloatArray | None = None,
                       small_shift: float = 0.0,
                       learns: bool = False,
                       raw_inflation: ArrayLike | None = None,
                       clip_shift: ArrayLike | None = None,
                       row_rule: str = "clip",
                       between_var: ArrayLike | None = None) -> SlopeChartDesign | None:
    """The chart of a version fitted on ``days``; None when too few days pin down a slope.

    ``shift`` is the main lane's step as a share of each slope; ``small_shift`` (below
    ``shift``; 0 for none) adds a second lane per predictor tuned to that smaller share.
    ``learns``: the reference learns from in-control days (the limits then count no reference
    error; see the module text).

    ``raw_inflation``: White's ratio of the fit window's rows as they are, unguarded. The fit
    window's day slopes (from day statistics) and the pooled reference are computed from the
    rows as they are, while the chart's days are guarded (``row_rule``); so the between-day
    variance ``tau²`` is estimated, and the reference's error measured, with the raw rows'
    variance ``c_raw sigma_w² (Sxx_d⁻¹)_jj``, and the days are then charted with the guarded
    one. Without it, the guarded variance serves for both: on rows with outliers the raw day
    slopes then scatter more than it says and the excess is taken for ``tau²``, which widens
    every day's variance and slows the chart (common practice, no source: estimate each variance
    component with the variance of the data it is computed from).

    ``inflation`` holds each predictor's ``c_j`` (:func:`monitor.stats.diagnosis.
    slope_noise_ratio`, computed on the fit window's rows guarded as :func:`slope_step` guards
    them), 1 when not known; ``row_scale`` is the robust within-day sd of the rows (the unit of
    :func:`slope_step`'s bound; the classical one when not given); ``row_rule`` says whether
    rows beyond it are left out ("drop") or clipped ("clip", versions fitted before).
    ``h``: the decision intervals solved before for these same arguments (stored with the
    version), instead of solving them again.

    ``clip_shift``: how far the fit window's pooled within slopes move when its rows are
    guarded as :func:`slope_step` guards a day's (:func:`monitor.stats.diagnosis.
    guarded_slope_shift`). The chart's reference is the within slope plus this shift, so that
    each day's guarded slope is compared with the fit window's guarded one (on rows with a long
    right tail whose scatter grows with a predictor the two differ); the lanes' steps stay those
    of the raw slopes.

    ``between_var``: ``tau²`` of the fit window's day slopes of rows guarded as the chart guards
    a day's (:func:`monitor.stats.diagnosis.guarded_between_day_variance`, stored with versions
    fitted since). Given, it is the chart's ``tau²``, and the reference's error is measured
    with the guarded variances too; ``raw_inflation`` then plays no part. Without it (versions
    stored before) ``tau²`` is estimated here from the raw day slopes as above.
    """
    keep = np.asarray(days.n) > 0
    k = days.dim - 1
    fit_days = days.select(keep)
    found = day_slopes(fit_days.comoment, fit_days.n, np.zeros(k))
    if int(found.usable.sum()) < 3 or int(np.asarray(fit_days.n).sum()) <= len(fit_days) + k:
        return None
    beta, sigma_w2, dof = within_fit(fit_days)
    if not sigma_w2 > 0:
        return None
    c = np.ones(k) if inflation is None or len(np.ravel(inflation)) != k \
        else np.maximum(np.asarray(inflation, dtype=np.float64).ravel(), MIN_INFLATION)
    dev = found.deviation[found.usable] - beta
    unit = found.unit[found.usable]
    within_var = c * sigma_w2 * unit
    c_raw = (c if raw_inflation is None or len(np.ravel(raw_inflation)) != k
             else np.maximum(np.asarray(raw_inflation, dtype=np.float64).ravel(),
                             MIN_INFLATION))
    guarded = between_var is not None and len(np.ravel(between_var)) == k
    if guarded:  # tau² of guarded day slopes; the reference's error of guarded rows too
        raw_var = within_var
        tau2 = np.maximum(np.asarray(between_var, dtype=np.float64).ravel(), 0.0)
    else:
        raw_var = c_raw * sigma_w2 * unit
        tau2 = np.array([between_day_variance(dev[:, j], raw_var[:, j]) for j in range(k)])
    v = within_var + tau2
    # the pooled within estimator's variance under the same model: Σ Sxx_d² v_d / (Σ Sxx_d)²
    # per predictor, with Sxx_d,jj = 1 / unit (exact for one predictor, the usual
    # approximation for several), v_d of the raw rows it is computed from
    sxx = 1.0 / unit
    ref_se = np.sqrt(np.sum(sxx**2 * (raw_var + tau2), axis=0)) / np.sum(sxx, axis=0)
    main = np.maximum(shift * np.abs(beta), 3.0 * ref_se)
    small = np.maximum(small_shift * np.abs(beta), 3.0 * ref_se)
    two_lanes = 0.0 < small_shift < shift and bool(np.any(small < main))
    lane_predictor = np.tile(np.arange(k), 2 if two_lanes else 1)
    target = np.concatenate([main, small]) if two_lanes else main
    steps = target / np.sqrt(v[:, lane_predictor])
    full_steps = np.full((len(fit_days), len(target)), np.nan)
    full_steps[found.usable] = steps
    if h is None or len(h) != len(target):
        h = _decision_interval(steps, ref_se[lane_predictor], tau2[lane_predictor],
                               within_var[:, lane_predictor], len(dev), dof,
                               target_arl, guarantee, learns)
    scale = row_scale if row_scale is not None and row_scale > 0 else float(np.sqrt(sigma_w2))
    gap = (np.asarray(clip_shift, dtype=np.float64).ravel()
           if clip_shift is not None and len(np.ravel(clip_shift)) == k else np.zeros(k))
    return SlopeChartDesign(slopes=beta + gap, clip_shift=gap, sigma_w2=sigma_w2,
                            row_scale=scale,
                            inflation=c, tau2=tau2,
                            target=target, reference_se=ref_se, h=h,
                            target_arl=float(target_arl), guarantee=float(guarantee),
                            fit_days=len(dev), fit_steps=full_steps,
                            lane_predictor=lane_predictor, learns=learns, row_rule=row_rule)


def slope_step(design: SlopeChartDesign, x: ArrayLike, y: ArrayLike,
               learned_weight: tuple[float, ...] = (),
               learned_sum: tuple[float, ...] = ()) -> SlopeStep | None:
    """Today's standardized slope deviations and steps from the day's rows ``x`` (``(n, k)``)
    and ``y``; None when the day gives no slope.

    A learning design standardizes against its reference as learned so far:
    ``learned_weight`` holds ``Σ w_d`` and ``learned_sum`` ``Σ w_d (b_d - beta_0)`` of the
    learned days, per predictor (empty: none learned yet).

    Each row's residual around the day's own line with the fit window's raw within slopes
    (through the day's median level, which one wild row cannot move) is first measured against
    ``±ROW_CLIP`` robust sd, and a row beyond it is left out of the day's slope (the design's
    ``row_rule`` "drop": outlier rejection followed by least squares, whose breakdown Hampel
    1985, *Technometrics* 27, 95-107, studies) or, for versions fitted before that rule, pulled
    in to the bound (``"clip"``, winsorized as in Huber's 1964 M-estimation). Either way one
    wild row at the edge of the day's range cannot swing the day's slope on its own; left out,
    a breakdown adds nothing to the slope's noise, where clipped it still counted 4 sd (with 2 %
    of rows a +40 min breakdown a day slope's variance falls by a fifth,
    ``tests/benchmarks/results/departures_drop.md``). Normal rows are almost never beyond the
    bound (``2 Φ(-4) = 6e-5``).
    """
    xm = np.asarray(x, dtype=np.float64)
    ym = np.asarray(y, dtype=np.float64).ravel()
    if len(ym) == 0:
        return None
    xm = xm.reshape(len(ym), -1)
    k = design.k
    xc = xm - xm.mean(axis=0)
    fitted = xc @ design.raw_slopes
    bound = ROW_CLIP * design.row_scale
    raw = ym - fitted
    if design.row_rule == "drop":
        keep = np.abs(raw - np.median(raw)) <= bound  # around the day's median level
        if not keep.any():
            return None
        day = Moments.of(np.column_stack([xm[keep], ym[keep]]))
    else:
        resid = np.clip(raw - np.median(raw), -bound, bound)
        day = Moments.of(np.column_stack([xm, fitted + resid]))
    found = day_slopes(day.comoment[None, :, :], [day.n], design.slopes)
    if not found.usable[0]:
        return None
    v = design.variance(found.unit)[0]
    dev = found.deviation[0]
    against, spread = dev, v
    if design.learns:
        weight = design.reference_weight + (np.asarray(learned_weight)
                                            if len(learned_weight) == k else 0.0)
        total = np.asarray(learned_sum) if len(learned_sum) == k else np.zeros(k)
        with np.errstate(divide="ignore", invalid="ignore"):
            against = np.where(np.isfinite(weight), dev - total / weight, dev)
            spread = v + 1.0 / weight
    lanes = design.lane_predictor
    lam = design.target / np.sqrt(spread[lanes])
    live = lam >= MIN_STEP
    any_live = np.zeros(k, dtype=bool)
    any_live[lanes[live]] = True
    z = np.where(any_live, against / np.sqrt(spread), np.nan)
    return SlopeStep(tuple(map(float, z)), tuple(float(s) if live[j] else float("nan")
                                              for j, s in enumerate(lam)),
                     tuple(float(d) for d in dev[:k]),
                     tuple(int(p) for p in lanes) if design.lanes != k else (),
                     tuple(float(s) for s in v[:k]))


def day_slope_weights(step: SlopeStep) -> tuple[float, ...]:
    """What a day adds to the learning reference: ``w_d = 1/v_d`` per predictor, then
    ``w_d (b_d - beta_0)`` (zero for a predictor without a finite slope that day)."""
    v = np.asarray(step.variance, dtype=np.float64)
    dev = np.asarray(step.deviation, dtype=np.float64)
    ok = np.isfinite(v) & (v > 0) & np.isfinite(dev)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = np.where(ok, 1.0 / v, 0.0)
        s = np.where(ok, dev * w, 0.0)
    return (*map(float, w), *map(float, s))


def learn_slopes(weight: tuple[float, ...], total: tuple[float, ...],
                 day: tuple[float, ...]) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """The learned ``Σ w_d`` and ``Σ w_d (b_d - beta_0)`` with one more day's
    :func:`day_slope_weights`."""
    k = len(day) // 2
    w0 = np.asarray(weight, dtype=np.float64) if len(weight) == k else np.zeros(k)
    s0 = np.asarray(total, dtype=np.float64) if len(total) == k else np.zeros(k)
    add = np.asarray(day, dtype=np.float64)
    return tuple(map(float, w0 + add[:k])), tuple(map(float, s0 + add[k:]))


def advance(upper: tuple[float, ...], lower: tuple[float, ...], step: SlopeStep | None
            ) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """The chart's sides after a day's step (unchanged on a day without one)."""
    if step is None:
        return upper, lower
    new_up, new_lo = [], []
    for j, lam in enumerate(step.step):
        z = step.z[step.predictor(j)]
        up = upper[j] if j < len(upper) else 0.0
        lo = lower[j] if j < len(lower) else 0.0
        if np.isfinite(z) and np.isfinite(lam):
            cap = max(Z_CLIP, lam + 3.0)
            zc = min(max(z, -cap), cap)
            up = max(0.0, up + lam * (zc - lam / 2))
            lo = max(0.0, lo + lam * (-zc - lam / 2))
        new_up.append(up)
        new_lo.append(lo)
    return tuple(new_up), tuple(new_lo)


# decision interval -------------------------------------------------------------------------
def _decision_interval(steps: FloatArray, ref_se: FloatArray, tau2: FloatArray,
                       within_var: FloatArray, days: int, dof: int,
                       target_arl: float, guarantee: float, learns: bool = False) -> FloatArray:
    """Each lane's ``H`` that keeps its two-sided chart's ARL at ``L`` (the number of lanes)
    times ``target_arl`` under the guaranteed estimation errors (see the module text); inf
    where no ``H`` up to :data:`MAX_H` does (the fit window pins that slope down too loosely).
    Every argument but the counts is given per lane (its predictor's figures). A learning
    reference (``learns``) counts no reference error: its recursive residuals are exact."""
    lanes = steps.shape[1]
    q_ref = float(tails.norm_ppf((1 + guarantee) / 2))
    hs = []
    for j in range(lanes):
        lam = steps[:, j]
        # underestimated variances: the within part on dof, tau² on days - 1 df, each at the
        # guarantee quantile
        within_hi = float(dof / tails.chi2_ppf(1 - guarantee, dof)) if dof > 0 else 1.0
        tau_hi = (float((days - 1) / tails.chi2_ppf(1 - guarantee, days - 1))
                  if days > 1 else 1.0)
        v = within_var[:, j] + tau2[j]
        sd = np.sqrt((within_var[:, j] * within_hi + tau2[j] * tau_hi) / v)
        # the reference's error, in day sd units (none for recursive residuals)
        shift = (0.0 if learns else q_ref) * ref_se[j] / np.sqrt(v)
        lam_q, sd_q, shift_q = _representative(lam, sd, shift)
        hs.append(_solve_h(lam_q, sd_q, shift_q, lanes * target_arl))
    return np.array(hs)


def _representative(lam: FloatArray, sd: FloatArray, shift: FloatArray
                    ) -> tuple[FloatArray, FloatArray, FloatArray]:
    """At most :data:`MIXTURE_DAYS` fit days, equally spaced in the order of their step."""
    live = lam >= MIN_STEP
    lam, sd, shift = lam[live], sd[live], shift[live]
    if len(lam) <= MIXTURE_DAYS:
        return lam, sd, shift
    order = np.argsort(lam)
    pick = order[np.round(np.linspace(0, len(lam) - 1, MIXTURE_DAYS)).astype(int)]
    return lam[pick], sd[pick], shift[pick]


def _solve_h(lam: FloatArray, sd: FloatArray, shift: FloatArray, target_arl: float) -> float:
    if len(lam) == 0:
        return float("inf")

    def gap(h: float) -> float:
        return float(np.log(min(two_sided_arl(lam, sd, shift, h), 1e300)) - np.log(target_arl))

    # without estimation error ARL >= exp(h) for a likelihood-ratio CUSUM (Wald's bound), so
    # log(target) brackets the answer unless the errors are large
    lo, hi = 1e-3, float(np.log(target_arl)) + 1.0
    if gap(lo) >= 0:
        return lo
    while gap(hi) < 0:
        if hi >= MAX_H:
            return float("inf")
        lo, hi = hi, min(hi * 2, MAX_H)
    return float(scipy.optimize.brentq(gap, lo, hi, xtol=1e-6))


def two_sided_arl(lam: ArrayLike, sd: ArrayLike, shift: ArrayLike, h: float) -> float:
    """In-control ARL (in chart steps) of the two-sided chart at decision interval ``h``.

    Each step draws a day from the given ones with equal probability; on that day ``z ~ N(shift,
    sd²)`` (the reference's error and the variance misestimate as given), so the upper side
    steps by ``N(lam (shift - lam/2), (lam sd)²)`` and the lower side by ``N(lam (-shift -
    lam/2), (lam sd)²)``. The sides combine as ``1/ARL = 1/ARL+ + 1/ARL-`` (Lucas & Crosier
    1982).
    """
    lam_ = np.asarray(lam, dtype=np.float64)
    s = np.asarray(sd, dtype=np.float64) * lam_
    m = np.asarray(shift, dtype=np.float64)
    up = mixture_arl(lam_ * (m - lam_ / 2), s, h)
    lo = mixture_arl(lam_ * (-m - lam_ / 2), s, h)
    with np.errstate(divide="ignore"):
        return float(1.0 / (1.0 / up + 1.0 / lo)) if min(up, lo) < np.inf else float("inf")


def mixture_arl(means: ArrayLike, sds: ArrayLike, h: float, nodes: int | None = None) -> float:
    """Zero-start ARL of ``S = max(0, S + X)``, signal at ``S > h``, for ``X`` an equal-weight
    mixture of ``N(means_i, sds_i²)``: Page's integral equation
    ``L(s) = 1 + L(0) F(-s) + ∫_0^h L(y) f(y - s) dy`` by Nyström's method on Gauss–Legendre
    nodes (as :func:`monitor.stats.arl.cusum_arl` for one normal)."""
    mu = np.asarray(means, dtype=np.float64).ravel()
    sd = np.asarray(sds, dtype=np.float64).ravel()
    if nodes is None:
        nodes = int(np.clip(np.ceil((2.0 * h / sd.min() + 8.0) / 8.0) * 8.0, 16, 240))
    x, w = np.polynomial.legendre.leggauss(nodes)
    half = 0.5 * h
    y = half * (x + 1.0)
    s_points = np.concatenate([[0.0], y])
    gap = y[None, :] - s_points[:, None]  # y_j - s_i
    z = (gap[:, :, None] - mu) / sd
    density = (np.exp(-0.5 * z * z) / (sd * _ROOT_2PI)).mean(axis=2)
    fall = scipy.special.ndtr((-s_points[:, None] - mu) / sd).mean(axis=1)
    system = np.empty((nodes + 1, nodes + 1))
    system[:, 0] = -fall
    system[:, 1:] = -density * (half * w)
    system[np.arange(nodes + 1), np.arange(nodes + 1)] += 1.0
    try:
        arl = float(np.linalg.solve(system, np.ones(nodes + 1))[0])
    except np.linalg.LinAlgError:
        return float("inf")
    return arl if 1.0 <= arl < 1e12 else float("inf")
