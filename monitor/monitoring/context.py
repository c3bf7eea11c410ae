"""What scoring days against one version needs, built once per version from its baseline.

The prediction model, the fit window's day statistics, the bias chart's design and limit, and
the in-control law of interval misses; for an imported version (whose fit window is not stored)
a design from what the import gave.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, timedelta
from functools import cached_property

import numpy as np
from numpy.typing import NDArray

from monitor.config import CheckSettings
from monitor.domain.check import CheckState
from monitor.domain.days import as_date
from monitor.domain.version import SlopeLimits, Version, VersionDraft
from monitor.stats import tails
from monitor.stats.calibration import (
    ChartDesign,
    calibrate_chart,
    chart_design,
    frozen_limit,
    self_starts,
    shock_persistence,
)
from monitor.stats.day_effects import day_residuals
from monitor.stats.misses import GuardedMissLaw, chi2_scales, spread_scales
from monitor.stats.moments import DayMoments, Moments
from monitor.stats.ols import fit_moments
from monitor.stats.persistent_misses import PersistentMissLaw
from monitor.stats.prediction import PredictionModel
from monitor.stats.self_start import learned_effects, level_of
from monitor.stats.window_summary import MAX_PERSISTENCE, DayEffects, FitDiagnosis
from monitor.stats.within_slope import SlopeChartDesign, design_slope_chart

FloatArray = NDArray[np.float64]


@dataclass(frozen=True, eq=False)
class VersionContext:
    """What scoring a day against one version needs; built once per version and run."""

    version: Version
    model: PredictionModel
    reference_days: DayMoments  # the fit window's day statistics, frozen at fit time
    design: ChartDesign
    h: float
    day_effects: bool  # the fit window showed day effects: decide slopes with the CR1 test
    sigma_w2: float | None
    within_df: int | None
    dispersion: float
    misses: PersistentMissLaw  # the in-control law of interval misses under day effects
    first_recent_day: date  # the recent window never reaches into the fit window
    slope_chart: SlopeChartDesign | None = None  # within-day slopes (None: fit window unknown)
    rhythm: tuple[float, ...] | None = None  # Mon..Sun offsets the bias chart subtracts
    learn_base: Moments | None = None  # self-starting: the fit window's day mean residuals
    learn_until: int = 0  # self-starting: learn until the level counts this many days
    effects: DayEffects | None = None  # the fit window's day effects (the coverage law's spread)
    # the days a slope chart's day waits before its reference learns it: a version fitted on
    # fewer than ``learn_until_days`` days has a weak reference that would absorb a small
    # change fast; a longer one learns each day at once (holding days back makes neighbouring
    # days share the reference's error, which its limits do not allow for)
    slope_learn_delay: int = 0
    k: float = 0.5
    target_arl: float = 1000.0
    guarantee: float = 0.95

    @cached_property
    def reference(self) -> Moments:
        """The fit window's statistics as one (merged once per context, read every day)."""
        return self.reference_days.total()

    def limit(self, state: CheckState) -> float:
        """The bias chart's limit on a day that starts from ``state``: ``h``, except for a
        self-starting version that has learned its whole window, whose level is from then on
        an estimate from a fixed number of days (:func:`monitor.stats.calibration.
        frozen_limit`)."""
        if self.learn_base is None:
            return self.h
        days = self.learn_base.n + state.learning.level.n
        if days < self.learn_until:  # learning, or paused by a refit that stands
            return self.h
        return frozen_limit(self.k, self.target_arl, self.guarantee, days)

    def miss_law(self, state: CheckState) -> PersistentMissLaw:
        """The coverage law on a day that starts from ``state``: the fit window's, except for a
        self-starting version that has learned days. Two weeks pin the day-to-day spread down
        loosely, and a fit that happened to underestimate it would make the coverage test cry
        wolf for as long as the version stands; such a version re-estimates the spread with the
        days it learned (:func:`monitor.stats.self_start.learned_effects`), and the guaranteed
        bound narrows with them. It learns only what the level learns: in-control days, up to
        ``learn_until``, none after a sign of change."""
        learned = state.learning.level
        if self.learn_base is None or self.effects is None or learned.n == 0:
            return self.misses
        effects = learned_effects(self.effects, self.learn_base, learned)
        law = GuardedMissLaw.around(effects.tau2, effects.sigma_w2,
                                    self.misses.base.wide.half_width,
                                    spread_scales(effects, self.guarantee, self.misses.phi))
        return PersistentMissLaw(law, self.misses.phi)

    @classmethod
    def build(cls, version: Version, settings: CheckSettings) -> VersionContext:
        """The scoring context of a stored version under the current check settings."""
        base = version.baseline
        effects = base.day_effects
        if base.reference is not None and effects is not None:
            reference = base.reference
            fit = fit_moments(reference.total(), version.terms[1:])
            design = chart_design(fit, reference, effects, base.diagnosis)
        else:
            reference = DayMoments.empty(version.k + 1)
            design = imported_design(version)
        learns = (base.reference is not None and settings.cusum_unit == "day"
                  and self_starts(design, settings.learn_until_days))
        learn_until = settings.learn_until_days if learns else 0
        stored = base.calibration
        if stored is not None and stored.matches(settings.cusum_k, settings.cusum_arl_days,
                                                 settings.guarantee, learn_until):
            h = stored.h
        else:
            h = calibrate_chart(design, settings.cusum_k, settings.cusum_arl_days,
                                settings.guarantee, learn_until).h
        rhythm = base.diagnosis.rhythm() if base.diagnosis is not None else None
        learn_base = None
        if learns:
            learn_base = _fit_level(reference, version.coefficients, rhythm)
        first_recent = (version.fit_end + timedelta(days=1) if version.fit_end
                        else version.active_from)
        assert first_recent is not None
        model = version.prediction_model()
        half_width = model.critical_value(version.level) * model.s
        phi_a = shock_persistence(_guarded_persistence(design, settings.guarantee), design.tau2,
                                  design.sigma_w2, design.counts)
        if effects is not None:  # persistent shocks leave fewer independent days to learn from
            misses = GuardedMissLaw.around(effects.tau2, effects.sigma_w2, half_width,
                                           spread_scales(effects, settings.guarantee, phi_a))
        else:  # fitted elsewhere: the day effects given at import, else none
            misses = GuardedMissLaw.around(design.tau2, design.sigma_w2, half_width,
                                           chi2_scales(version.line.dof, settings.guarantee))
        slope_chart = None
        if base.reference is not None:
            slope_chart = slope_chart_of(reference, base.diagnosis, settings, base.slope_limits)
        return cls(version=version, model=model, reference_days=reference,
                   design=design, h=float(h),
                   day_effects=bool(effects and effects.present(settings.day_effects_alpha)),
                   sigma_w2=effects.sigma_w2 if effects else base.sigma_w2,
                   within_df=effects.df_within if effects else None,
                   dispersion=base.dispersion or 1.0,
                   misses=PersistentMissLaw(misses, phi_a),
                   first_recent_day=first_recent, slope_chart=slope_chart, rhythm=rhythm,
                   learn_base=learn_base, learn_until=learn_until, effects=effects,
                   slope_learn_delay=(settings.slope_learn_delay_days
                                      if design.n_days < settings.learn_until_days else 0),
                   k=settings.cusum_k,
                   target_arl=settings.cusum_arl_days, guarantee=settings.guarantee)


def slope_chart_of(reference: DayMoments, diagnosis: FitDiagnosis | None,
                   settings: CheckSettings,
                   limits: SlopeLimits | None = None) -> SlopeChartDesign | None:
    """The within-day slope chart of a fit window under ``settings``; its decision intervals
    from ``limits`` when they were solved for the same settings (a fitted version stores
    them, :class:`~monitor.domain.version.SlopeLimits`), else solved here."""
    d = diagnosis
    stored = (limits.array() if limits is not None and limits.matches(
        settings.slope_chart_step, settings.slope_chart_arl_days, settings.guarantee,
        settings.slope_chart_small_step, settings.slope_chart_reference) else None)
    return design_slope_chart(reference, (d.slope_noise_ratio or None) if d else None,
                              settings.slope_chart_step, settings.slope_chart_arl_days,
                              settings.guarantee, row_scale=d.robust_sd if d else None,
                              h=stored, small_shift=settings.slope_chart_small_step,
                              raw_inflation=(d.slope_noise_ratio_raw or None) if d else None,
                              clip_shift=(d.slope_clip_shift or None) if d else None,
                              row_rule=d.slope_row_rule if d else "clip",
                              between_var=(d.slope_between_var or None) if d else None,
                              learns=settings.slope_chart_reference == "learning")


def slope_limits_of(chart: SlopeChartDesign | None,
                    settings: CheckSettings) -> SlopeLimits | None:
    """What a version stores of its slope chart (None: the window pins down no slope)."""
    if chart is None:
        return None
    return SlopeLimits(settings.slope_chart_step, settings.slope_chart_arl_days,
                       settings.guarantee,
                       tuple(float(h) if np.isfinite(h) else None for h in chart.h),
                       settings.slope_chart_small_step, settings.slope_chart_reference)


def _fit_level(reference: DayMoments, coefficients: FloatArray,
               rhythm: tuple[float, ...] | None) -> Moments:
    """A self-starting version's level from its fit days: their mean residuals, net of the
    weekly rhythm when there is one. The offsets were estimated on these same days, which
    takes ``W - 1`` degrees of freedom from the sum of squares; it is scaled by
    ``(G - 1)/(G - W)`` so the sd stays unbiased (one-way ANOVA; common practice, no source)."""
    days = day_residuals(reference, coefficients)
    present = days.counts > 0
    means = days.means[present]
    if rhythm is None:
        return level_of(means)
    weekdays = np.array([as_date(d).weekday() for d in np.asarray(reference.days)[present]])
    level = level_of(means - np.asarray(rhythm)[weekdays])
    g, w = level.n, len(set(weekdays.tolist()))
    if g <= w:
        return level
    return Moments(level.n, level.mean, level.comoment * (g - 1) / (g - w), level.minimum,
                   level.maximum)


def _guarded_persistence(design: ChartDesign, guarantee: float) -> float:
    """The persistence the coverage law assumes: when the fit window showed persistence, its
    estimate raised to the ``guarantee`` quantile of its sampling law ``N(phi, (1 - phi²)/G)``
    (Bartlett 1946, from memory), as the spread is; else the bias-corrected estimate."""
    phi = design.phi_true
    if design.phi <= 0 or design.n_days < 3:
        return phi
    se = float(np.sqrt((1 - phi**2) / design.n_days))
    return float(min(phi + tails.norm_ppf(guarantee) * se, MAX_PERSISTENCE))


def imported_design(version: Version | VersionDraft) -> ChartDesign:
    """A chart design for a version fitted elsewhere (no day statistics of its fit window).

    Day effects are those given at import (none by default). With a covariance matrix the
    coefficients' uncertainty enters the standardization as usual; without one it is unknown
    and left out (the slope block is made so large that its inverse vanishes).
    """
    line, base = version.line, version.baseline
    model = line.prediction_model()
    k = line.k
    a = np.zeros((k + 1, k + 1))
    if model.has_leverage and model.n and model.slope_inverse is not None:
        a[0, 0] = model.n
        a[1:, 1:] = np.linalg.inv(model.slope_inverse)
        xmean = model.xmean if model.xmean is not None else np.zeros(k)
    else:
        a[0, 0] = line.dof + k + 1
        a[1:, 1:] = np.eye(k) * 1e200
        xmean = np.zeros(k)
    tau2 = base.tau2 or 0.0
    sigma_w2 = base.sigma_w2 if base.sigma_w2 else max(model.s**2 - tau2, 0.0)
    return ChartDesign(counts=np.zeros(0), rows=np.zeros((0, k + 1)), a=a,
                       b=np.zeros((k + 1, k + 1)), xmean=xmean, tau2=tau2, sigma_w2=sigma_w2,
                       n0=1.0, n_rows=int(a[0, 0]), n_days=0)
