"""One day's evaluation against the version in force: scores, signals, decision, reasons.

Pure: arrays and stored statistics in, a :class:`~monitor.store.checks.DayCheck` and the state
carried to the next day out. Loading and storing belong to :mod:`monitor.monitoring.check`.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from datetime import date, datetime, timedelta
from typing import Any

import numpy as np
from numpy.typing import NDArray

from monitor.config import CheckSettings, Wording
from monitor.domain.days import as_date
from monitor.errors import DegenerateDataError, DegenerateDataWarning
from monitor.monitoring.wording import Figures, reasons_for
from monitor.stats.calibration import ChartDesign, calibrate_h, standardize_days
from monitor.stats.change import (
    FTest,
    SupF,
    chow_test,
    clustered_change_test,
    nightly_candidates,
    predictive_failure_test,
    slope_change_test,
    sup_f_test,
)
from monitor.stats.coverage import CoverageTest
from monitor.stats.cusum import CusumState, tabular_cusum
from monitor.stats.day_effects import DayEffects, day_residuals
from monitor.stats.decision import OK, REFIT, Evidence, Policy, Verdict, decide
from monitor.stats.misses import GuardedMissLaw, spread_uncertainty
from monitor.stats.moments import DayMoments, Moments
from monitor.stats.ols import fit_moments
from monitor.stats.prediction import PredictionModel
from monitor.stats.spread import SpreadTest, spread_test
from monitor.store.checks import DayCheck
from monitor.store.versions import VersionRecord

FloatArray = NDArray[np.float64]


@dataclass(frozen=True, eq=False)
class VersionContext:
    """What scoring a day against one version needs; built once per version and run."""

    version: VersionRecord
    model: PredictionModel
    reference_days: DayMoments  # the fit window's day statistics, frozen at fit time
    design: ChartDesign
    h: float
    day_effects: bool  # the fit window showed day effects: decide slopes with the CR1 test
    sigma_w2: float | None
    within_df: int | None
    dispersion: float
    misses: GuardedMissLaw  # the in-control law of interval misses under day effects
    first_recent_day: date  # the recent window never reaches into the fit window

    @property
    def reference(self) -> Moments:
        return self.reference_days.total()


    @classmethod
    def build(cls, version: VersionRecord, settings: CheckSettings) -> VersionContext:
        """The scoring context of a stored version under the current check settings."""
        diag = version.diagnostics
        effects = DayEffects(**diag["day_effects"]) if diag.get("day_effects") else None
        if version.reference is not None and effects is not None:
            reference = DayMoments.from_dict(version.reference)
            fit = fit_moments(reference.total(), version.terms[1:])
            design = ChartDesign.from_fit(fit, reference, effects)
        else:
            reference = DayMoments.empty(version.k + 1)
            design = imported_design(version)
        h = version.cusum_h
        stored = diag.get("calibration", {})
        wanted = {"k": settings.cusum_k, "target_arl": settings.cusum_arl_days,
                  "guarantee": settings.guarantee}
        if h is None or any(stored.get(key) != value for key, value in wanted.items()):
            h = calibrate_h(design, **wanted).h
        first_recent = (version.fit_end + timedelta(days=1) if version.fit_end
                        else version.active_from)
        assert first_recent is not None
        model = version.prediction_model()
        half_width = model.critical_value(version.level) * model.s
        if effects is not None:
            misses = GuardedMissLaw.around(effects.tau2, effects.sigma_w2, half_width,
                                           spread_uncertainty(effects), settings.guarantee)
        else:  # fitted elsewhere: the day effects given at import, else none
            misses = GuardedMissLaw.around(design.tau2, design.sigma_w2, half_width,
                                           1.0 / np.sqrt(2.0 * version.dof), settings.guarantee)
        return cls(version=version, model=model, reference_days=reference,
                   design=design, h=float(h),
                   day_effects=bool(effects and effects.present(settings.day_effects_alpha)),
                   sigma_w2=effects.sigma_w2 if effects else version.sigma_w2,
                   within_df=effects.df_within if effects else None,
                   dispersion=version.dispersion or 1.0, misses=misses,
                   first_recent_day=first_recent)


def imported_design(version: VersionRecord) -> ChartDesign:
    """A chart design for a version fitted elsewhere (no day statistics of its fit window).

    Day effects are those given at import (none by default). With a covariance matrix the
    coefficients' uncertainty enters the standardization as usual; without one it is unknown
    and left out (the slope block is made so large that its inverse vanishes).
    """
    model = version.prediction_model()
    k = version.k
    a = np.zeros((k + 1, k + 1))
    if model.has_leverage and model.n and model.slope_inverse is not None:
        a[0, 0] = model.n
        a[1:, 1:] = np.linalg.inv(model.slope_inverse)
        xmean = model.xmean if model.xmean is not None else np.zeros(k)
    else:
        a[0, 0] = version.dof + k + 1
        a[1:, 1:] = np.eye(k) * 1e200
        xmean = np.zeros(k)
    tau2 = version.tau2 or 0.0
    sigma_w2 = version.sigma_w2 if version.sigma_w2 else max(model.s**2 - tau2, 0.0)
    return ChartDesign(counts=np.zeros(0), rows=np.zeros((0, k + 1)), a=a,
                       b=np.zeros((k + 1, k + 1)), xmean=xmean, tau2=tau2, sigma_w2=sigma_w2,
                       n0=1.0, n_rows=int(a[0, 0]), n_days=0)


@dataclass(frozen=True)
class Carry:
    """What one day hands to the next: CUSUM state, run onsets and sums, status, coverage."""

    cusum: CusumState
    upper_onset: date | None
    lower_onset: date | None
    upper_resid: float  # sum of residuals since the upper run began (response units)
    upper_rows: int
    lower_resid: float
    lower_rows: int
    status: str
    status_since: date | None
    coverage_days: tuple[tuple[date, int, int], ...]  # (day, rows, covered), oldest first
    fresh_from: date | None = None  # windows count days from here (last restart), if set

    @classmethod
    def initial(cls) -> Carry:
        return cls(CusumState.zero(), None, None, 0.0, 0, 0.0, 0, OK, None, ())

    @classmethod
    def after(cls, check: DayCheck, coverage_days: tuple[tuple[date, int, int], ...]) -> Carry:
        """The state after a stored check; ``coverage_days`` are the checks before it."""
        d = check.details.get("cusum", {})
        fresh = _day(check.details.get("fresh_from"))
        kept = tuple(c for c in coverage_days if fresh is None or c[0] >= fresh)
        return cls(
            CusumState(check.cusum_upper, check.cusum_lower, check.cusum_upper_run,
                       check.cusum_lower_run),
            _day(d.get("upper_onset")), _day(d.get("lower_onset")),
            float(d.get("upper_resid", 0.0)), int(d.get("upper_rows", 0)),
            float(d.get("lower_resid", 0.0)), int(d.get("lower_rows", 0)),
            check.status, check.status_since, kept, fresh)

    def restarted(self, day: date) -> Carry:
        """Everything starts afresh on ``day`` (a promotion or an acknowledgement takes effect).

        The CUSUM is back at zero, a held refit is released, the status starts anew (its
        "since" is the restart day at the earliest), and the coverage and test windows count
        only days from ``day``: evidence that was acted upon is not counted twice.
        """
        return replace(self, cusum=CusumState.zero(), upper_onset=None, lower_onset=None,
                       upper_resid=0.0, upper_rows=0, lower_resid=0.0, lower_rows=0,
                       status=OK, status_since=None, coverage_days=(), fresh_from=day)


def _day(value: Any) -> date | None:
    return date.fromisoformat(value) if value else None


@dataclass(frozen=True, eq=False)
class DayInput:
    day: date
    x: FloatArray  # (n, k) rows of the day
    y: FloatArray  # (n,)
    revision: int  # the day's day_stats revision (0: no rows stored)
    recent_days: DayMoments  # the recent window's day statistics, this day included
    history_days: DayMoments  # every monitored day of this version so far (at most a year)


@contextmanager
def _quiet() -> Iterator[list[str]]:
    """Collect degenerate-data warnings of optional figures as notes instead of raising them."""
    notes: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DegenerateDataWarning)
        yield notes
    notes.extend(str(w.message) for w in caught if issubclass(w.category, DegenerateDataWarning))


def evaluate_day(ctx: VersionContext, carry: Carry, data: DayInput, settings: CheckSettings,
                 words: Wording, response: str, now: datetime, model_id: int,
                 model_name: str) -> tuple[DayCheck, Carry]:
    """Score one day, move the signals, decide, and say why."""
    n = len(data.y)
    level = ctx.version.level
    scores = ctx.model.score(data.x, data.y, level) if n else None
    covered = scores.covered if scores else 0
    residuals = data.y - scores.predicted if scores else np.zeros(0)
    mean_residual = float(residuals.mean()) if n else float("nan")

    # coverage over the rolling window, then the bias CUSUM ------------------------------
    window = settings.coverage_window_days
    recent_cov = (*((d, m, c) for d, m, c in carry.coverage_days
                    if (data.day - d).days < window), (data.day, n, covered))
    w_rows = sum(m for _, m, _ in recent_cov)
    w_cov = sum(c for _, _, c in recent_cov)
    cov = (ctx.misses.test([m for _, m, _ in recent_cov], w_cov, level, ctx.dispersion)
           if w_rows else None)
    carry = replace(carry, coverage_days=recent_cov)
    cusum_u, carry = _step_cusum(ctx, carry, data, residuals, settings)
    state = carry.cusum
    lead = _Leading.of(carry, settings.cusum_k)

    # slope, change date, spread over the recent window ------------------------------------
    with _quiet() as notes:
        slope, chow, classic, predictive, supf, recent_fit = _change_tests(ctx, data.recent_days)
        spread = _spread(ctx, data.recent_days)

    evidence = Evidence(
        coverage_pvalue_low=cov.pvalue_low if cov else float("nan"),
        coverage_pvalue_high=cov.pvalue_high if cov else float("nan"),
        cusum_upper=state.upper, cusum_lower=state.lower, cusum_h=ctx.h,
        slope_pvalue=slope.pvalue if slope else float("nan"),
        spread_pvalue=spread.pvalue if spread else float("nan"),
    )
    policy = Policy(settings.refit_pvalue, settings.watch_pvalue, settings.watch_cusum_fraction)
    verdict = decide(evidence, policy, refit_held=carry.status == REFIT)

    # where a change began, and what the line looks like since (only when there is a finding)
    change_day, since_change = None, None
    bias_units, bias_from = lead.shift_units, lead.onset
    if verdict.findings:
        with _quiet() as more_notes:
            change_day, since_change = _since_change(ctx, data.history_days)
        notes.extend(more_notes)
    if since_change is not None:
        bias_units = float(day_residuals(since_change, ctx.version.coefficients).means[0])
        bias_from = change_day
        slopes_since = _slopes(since_change.total())
        if slopes_since is not None:
            recent_fit = slopes_since

    since = carry.status_since if (carry.status == verdict.status and carry.status_since) \
        else data.day
    figures = Figures(
        day=data.day, level=level, n=n, covered=covered, window_days=window,
        window=cov, cusum_shift=bias_units, cusum_onset=bias_from, h=ctx.h,
        cusum_value=lead.value, change_day=change_day,
        old_slopes=ctx.version.coefficients[1:], new_slopes=recent_fit,
        predictors=ctx.version.terms[1:], slope=slope, spread=spread, since=since,
        held_since=carry.status_since if verdict.held else None,
    )
    reasons = reasons_for(verdict, figures, words, response)
    carry = replace(carry, status=verdict.status, status_since=since)
    check = DayCheck(
        model_id=model_id, day=data.day, version_id=ctx.version.id,
        stats_revision=data.revision, n=n, covered=covered,
        extrapolated=int(scores.extrapolated.sum()) if scores else 0,
        coverage=covered / n if n else None,
        mean_residual=mean_residual if n else None, window_n=w_rows, window_covered=w_cov,
        window_coverage=cov.coverage if cov else None,
        wilson_low=cov.wilson_low if cov else None, wilson_high=cov.wilson_high if cov else None,
        coverage_p_low=cov.pvalue_low if cov else None,
        coverage_p_high=cov.pvalue_high if cov else None,
        cusum_u=cusum_u, cusum_upper=state.upper, cusum_lower=state.lower,
        cusum_upper_run=state.upper_run, cusum_lower_run=state.lower_run, cusum_h=ctx.h,
        cusum_signal=state.upper > ctx.h or state.lower > ctx.h,
        cusum_onset=lead.onset if lead.run else None,
        cusum_shift=lead.shift_units if lead.run else None,
        slope_statistic=slope.statistic if slope else None,
        slope_pvalue=slope.pvalue if slope else None,
        slope_method=slope.name if slope else None,
        chow_statistic=chow.statistic if chow else None,
        chow_pvalue=chow.pvalue if chow else None,
        change_day=change_day,
        supf_statistic=supf.statistic if supf else None,
        supf_pvalue=supf.pvalue if supf else None,
        spread_ratio=spread.ratio if spread else None,
        spread_pvalue=spread.pvalue if spread else None,
        status=verdict.status, status_since=since, reasons=reasons,
        details=_details(carry, verdict, slope, classic, predictive, supf, spread,
                         lead.shift_std, recent_fit, notes),
        checked_at=now, model=model_name,
    )
    return check, carry


@dataclass(frozen=True)
class _Leading:
    """The CUSUM side that stands higher: its value, run, onset and shift estimates."""

    value: float
    run: int
    onset: date | None
    shift_units: float  # mean residual over the run (response units)
    shift_std: float  # Montgomery's ±(k + C/N), standardized units

    @classmethod
    def of(cls, carry: Carry, k: float) -> _Leading:
        state = carry.cusum
        if state.upper >= state.lower:
            value, run, onset, rows, resid, sign = (state.upper, state.upper_run,
                                                    carry.upper_onset, carry.upper_rows,
                                                    carry.upper_resid, 1.0)
        else:
            value, run, onset, rows, resid, sign = (state.lower, state.lower_run,
                                                    carry.lower_onset, carry.lower_rows,
                                                    carry.lower_resid, -1.0)
        return cls(value, run, onset, resid / rows if rows else float("nan"),
                   sign * (k + value / run) if run else float("nan"))


def _step_cusum(ctx: VersionContext, carry: Carry, data: DayInput, residuals: FloatArray,
                settings: CheckSettings) -> tuple[float | None, Carry]:
    """Move the CUSUM by this day's rows (one step per day, or per row), track run onsets."""
    n = len(residuals)
    if n == 0:
        return None, carry  # an empty day does not move the chart
    if settings.cusum_unit == "observation":
        u = standardize_days(residuals, np.ones(n), data.x, ctx.design)
    else:
        u = standardize_days([residuals.mean()], [n], data.x.mean(axis=0)[None, :], ctx.design)
    path = tabular_cusum(u, settings.cusum_k, ctx.h, carry.cusum)
    state = path.state
    total, steps = float(residuals.sum()), len(u)
    up = _run_update(carry.cusum.upper_run, state.upper_run, steps, carry.upper_onset,
                     carry.upper_resid, carry.upper_rows, data.day, total, n)
    low = _run_update(carry.cusum.lower_run, state.lower_run, steps, carry.lower_onset,
                      carry.lower_resid, carry.lower_rows, data.day, total, n)
    carry = replace(carry, cusum=state, upper_onset=up[0], upper_resid=up[1], upper_rows=up[2],
                    lower_onset=low[0], lower_resid=low[1], lower_rows=low[2])
    return float(u[-1]) if len(u) == 1 else float(np.mean(u)), carry


def _run_update(before: int, after: int, steps: int, onset: date | None, resid: float,
                rows: int, day: date, total: float, n: int) -> tuple[date | None, float, int]:
    """Onset day and residual sums of a CUSUM side's current run (none when it stands at 0).

    The run continues when it grew by exactly today's steps; otherwise it began today (for
    per-row steps: somewhere among today's rows, and the day is the onset's resolution).
    """
    if after == 0:
        return None, 0.0, 0
    if before > 0 and onset is not None and after == before + steps:
        return onset, resid + total, rows + n
    return day, total, n


def _change_tests(ctx: VersionContext, recent: DayMoments
                  ) -> tuple[FTest | None, FTest | None, FTest | None, FTest | None,
                             SupF | None, FloatArray | None]:
    """Slope test for the decision, Chow F, classic slope F, predictive failure, sup-F."""
    present = recent.select(np.asarray(recent.n) > 0)
    rows = int(present.n.sum())
    if rows == 0:
        return None, None, None, None, None, None
    reference = ctx.reference
    p = ctx.model.k + 1
    predictive = predictive_failure_test(reference, present.total()) if rows < p else None
    if len(present) < 2 or rows <= p:
        return None, None, None, predictive, None, None
    total = present.total()
    classic = slope_change_test(reference, total)
    chow = chow_test(reference, total)
    decision = classic
    if ctx.day_effects:
        decision = clustered_change_test(ctx.reference_days, present, restriction="slopes",
                                         smaller_window_df=True)
    sample = ctx.reference_days.then(present)
    candidates = nightly_candidates(sample.n, len(ctx.reference_days))
    supf = sup_f_test(sample, candidates) if len(candidates) else None
    return decision, chow, classic, predictive, supf, _slopes(total)


def _since_change(ctx: VersionContext, history: DayMoments
                  ) -> tuple[date | None, DayMoments | None]:
    """The most likely single change day since monitoring began, and the days since it.

    The location of the largest Chow F over every day boundary from the end of the fit window
    to the last day (the sup-F location without trimming; Quandt 1960), computed from day
    statistics. Only a location: whether there is a change is for the signals to say.
    """
    present = history.select(np.asarray(history.n) > 0)
    if len(present) < 2:
        return None, None
    sample = ctx.reference_days.then(present)
    first = max(len(ctx.reference_days) - 1, 0)
    candidates = np.arange(first, len(sample) - 1)
    result = sup_f_test(sample, candidates)
    if result.location is None:
        return None, None
    after = present.select(np.asarray(present.days) > np.asarray(result.last_day))
    merged = DayMoments.stack([after.days[0]], [after.total()], after.dim)
    return as_date(result.first_new_day), merged


def _slopes(window: Moments) -> FloatArray | None:
    try:
        return fit_moments(window).coef[1:]
    except DegenerateDataError:
        return None


def _spread(ctx: VersionContext, recent: DayMoments) -> SpreadTest | None:
    if int(np.asarray(recent.n).sum()) == 0:
        return None
    resid = day_residuals(recent, ctx.version.coefficients)
    return spread_test(resid, ctx.model.s, ctx.model.dof, ctx.sigma_w2, ctx.within_df)


def _details(carry: Carry, verdict: Verdict, slope: FTest | None, classic: FTest | None,
             predictive: FTest | None, supf: SupF | None, spread: SpreadTest | None,
             shift_std: float, recent_fit: FloatArray | None, notes: list[str]) -> dict[str, Any]:
    def test(t: FTest | None) -> dict[str, Any] | None:
        if t is None:
            return None
        return {"name": t.name, "statistic": t.statistic, "pvalue": t.pvalue,
                "df_num": t.df_num, "df_den": t.df_den, "clusters": t.n_clusters,
                "reason": t.reason}

    return {
        "fresh_from": carry.fresh_from.isoformat() if carry.fresh_from else None,
        "cusum": {
            "upper_onset": carry.upper_onset.isoformat() if carry.upper_onset else None,
            "lower_onset": carry.lower_onset.isoformat() if carry.lower_onset else None,
            "upper_resid": carry.upper_resid, "upper_rows": carry.upper_rows,
            "lower_resid": carry.lower_resid, "lower_rows": carry.lower_rows,
            "shift_std": shift_std,
        },
        "findings": [{"signal": f.signal, "level": f.level, "kind": f.kind}
                     for f in verdict.findings],
        "held": verdict.held,
        "slope_decision": test(slope), "slope_classic": test(classic),
        "predictive_failure": test(predictive),
        "supf": None if supf is None else {
            "statistic": supf.statistic, "pvalue": supf.pvalue, "bound": supf.pvalue_bound,
            "q": supf.q, "lambda_bounds": list(supf.lambda_bounds),
            "first_new_day": None if supf.first_new_day is None
            else as_date(supf.first_new_day).isoformat()},
        "spread": None if spread is None else {
            "ratio": spread.ratio, "statistic": spread.statistic, "df_num": spread.df_num,
            "df_den": spread.df_den, "pvalue": spread.pvalue,
            "pvalue_narrower": spread.pvalue_narrower, "method": spread.method},
        "recent_slopes": None if recent_fit is None else list(map(float, recent_fit)),
        "notes": notes,
    }


__all__ = ["Carry", "CoverageTest", "DayInput", "VersionContext", "evaluate_day"]
