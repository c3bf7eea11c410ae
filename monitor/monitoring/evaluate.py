"""One day's evaluation against the version in force: scores, signals, decision, reasons.

Pure: arrays and stored statistics in, a :class:`~monitor.domain.check.DayCheck` and the state
carried to the next day out. Loading and storing belong to :mod:`monitor.monitoring.check`.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from datetime import date, datetime

import numpy as np
from numpy.typing import NDArray

from monitor.config import CheckSettings, Wording
from monitor.domain.check import (
    Carry,
    CheckDetails,
    CheckState,
    CoverageDay,
    DayCheck,
    SideRun,
    SlopeChartDay,
    SupFSummary,
    coverage_span,
)
from monitor.domain.days import as_date
from monitor.domain.phrasing import percent, window_span
from monitor.domain.status import Status
from monitor.errors import DegenerateDataError, DegenerateDataWarning
from monitor.monitoring.context import VersionContext
from monitor.monitoring.wording import Figures, reasons_for
from monitor.stats.calibration import prewhiten, standardize_days
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
from monitor.stats.cusum import tabular_cusum
from monitor.stats.day_effects import day_residuals
from monitor.stats.decision import Evidence, Policy, Verdict, decide
from monitor.stats.diagnosis import day_spread, robust_spread_test
from monitor.stats.moments import DayMoments, Moments
from monitor.stats.ols import fit_moments
from monitor.stats.self_start import learned, q_value
from monitor.stats.spread import SpreadTest, spread_test
from monitor.stats.within_slope import (
    SlopeStep,
    advance,
    day_slope_weights,
    learn_slopes,
    slope_step,
)

FloatArray = NDArray[np.float64]
MIN_SPREAD_DAYS = 5  # fit days with a day spread below which the classical spread test is kept


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
    today = CoverageDay(data.day, n, covered, day_spread(residuals) if n else None)
    kept = max(window, settings.test_window_days)
    carried = (*(c for c in carry.coverage_days if (data.day - c.day).days < kept), today)
    recent_cov = tuple(c for c in carried if (data.day - c.day).days < window)
    w_rows = sum(c.rows for c in recent_cov)
    w_cov = sum(c.covered for c in recent_cov)
    law = ctx.miss_law(carry.state)
    cov = law.test([c.rows for c in recent_cov], w_cov, level, ctx.dispersion) if w_rows else None
    window_first, window_held = coverage_span(data.day, window, carry.fresh_from)
    window_version = (ctx.version.number if carry.fresh_from is not None
                      and carry.fresh_from == ctx.version.active_from else None)
    carry = replace(carry, coverage_days=carried,
                    state=replace(carry.state, day_spread=today.spread))
    h = ctx.limit(carry.state)
    cusum_u, carry = _step_cusum(ctx, carry, data, residuals, settings)
    slope_chart, slope_step_today, carry = _step_slope_chart(ctx, carry, data)
    state = carry.state.cusum
    lead = _Leading.of(carry.state, settings.cusum_k)

    # slope, change date, spread over the recent window ------------------------------------
    with _quiet() as notes:
        slope, chow, classic, predictive, supf, recent_fit = _change_tests(ctx, data.recent_days)
        spread = _spread(ctx, data.recent_days, carried, settings.test_window_days)

    if cov is not None and cov.pvalue_high < settings.watch_pvalue:
        notes.append(_wider_than_needed(ctx, cov.coverage, window_span(
            window_held, window, window_first, window_version)))
    evidence = Evidence(
        coverage_pvalue_low=cov.pvalue_low if cov else float("nan"),
        coverage_pvalue_high=cov.pvalue_high if cov else float("nan"),
        cusum_upper=state.upper, cusum_lower=state.lower, cusum_h=h,
        slope_pvalue=slope.pvalue if slope else float("nan"),
        spread_pvalue=spread.pvalue if spread else float("nan"),
        slope_chart_ratio=slope_chart.value / slope_chart.h if slope_chart else float("nan"),
    )
    policy = Policy(settings.refit_pvalue, settings.watch_pvalue, settings.watch_cusum_fraction)
    verdict = decide(evidence, policy, refit_held=carry.status == Status.REFIT)
    clean = carry.state.clean_days + 1 if not verdict.findings else 0
    watch_held = (verdict.status == Status.OK and carry.status == Status.WATCH
                  and clean < settings.watch_clear_days)
    if watch_held:
        verdict = replace(verdict, status=Status.WATCH)
    carry = replace(carry, state=replace(carry.state, clean_days=clean))
    if settings.cusum_unit == "day":
        carry = _learn(ctx, carry, data, residuals, verdict, settings.watch_cusum_fraction)
    carry = _learn_slopes(ctx, carry, slope_step_today, verdict,
                          settings.watch_cusum_fraction, ctx.slope_learn_delay)

    # where a change began, and what the line looks like since (only when there is a finding)
    change_day, since_change = None, None
    bias_units, bias_from = lead.shift_units, lead.onset
    advised = carry.state.advised_change if verdict.held else None
    onset = carry.state.slope_onset if any(f.kind == "within" for f in verdict.findings) \
        else None
    if onset is not None and (advised is None or onset >= advised):
        # the within-day slope chart leads: its run's start is the change day (Page's
        # estimate: the last day the chart stood at zero, Page 1954), and day shocks do not
        # blur it as they blur a location found from day-level fits
        change_day, since_change = onset, _days_from(data.history_days, onset)
    elif verdict.findings or verdict.held:
        with _quiet() as more_notes:
            change_day, since_change = _since_change(ctx, data.history_days, advised)
        notes.extend(more_notes)
    if verdict.status == Status.REFIT:
        advised = advised or change_day or carry.state.slope_onset or lead.onset
    carry = replace(carry, state=replace(carry.state, advised_change=advised))
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
        window=cov, cusum_shift=bias_units, cusum_onset=bias_from, h=h,
        cusum_value=lead.value, change_day=change_day,
        old_slopes=ctx.version.coefficients[1:], new_slopes=recent_fit,
        predictors=ctx.version.terms[1:], slope=slope, spread=spread, since=since,
        held_since=carry.status_since if verdict.held else None, slope_chart=slope_chart,
        slope_onset=carry.state.slope_onset, window_first=window_first,
        window_held=window_held, window_version=window_version,
        extrapolated=int(scores.extrapolated.sum()) if scores else 0,
        typical_x=ctx.version.line.xmean,
    )
    reasons = reasons_for(verdict, figures, words, response)
    if watch_held:
        reasons.insert(0, f"Still on watch: back to ok after {settings.watch_clear_days} days in "
                          f"a row without a finding ({clean} so far)")
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
        cusum_upper_run=state.upper_run, cusum_lower_run=state.lower_run, cusum_h=h,
        cusum_signal=state.upper > h or state.lower > h,
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
        status=verdict.status, status_since=since, reasons=tuple(reasons),
        details=_details(verdict, slope, classic, predictive, supf, spread, lead.shift_std,
                         recent_fit, notes, slope_chart),
        state=carry.state, checked_at=now, model=model_name,
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
    def of(cls, state: CheckState, k: float) -> _Leading:
        c = state.cusum
        if c.upper >= c.lower:
            value, run, side, sign = c.upper, c.upper_run, state.upper, 1.0
        else:
            value, run, side, sign = c.lower, c.lower_run, state.lower, -1.0
        return cls(value, run, side.onset, side.mean,
                   sign * (k + value / run) if run else float("nan"))


def _step_cusum(ctx: VersionContext, carry: Carry, data: DayInput, residuals: FloatArray,
                settings: CheckSettings) -> tuple[float | None, Carry]:
    """Move the CUSUM by this day's rows (one step per day, or per row), track run onsets."""
    n = len(residuals)
    if n == 0:
        return None, carry  # an empty day does not move the chart
    before = carry.state
    last_u = before.last_u
    if settings.cusum_unit == "observation":
        u = standardize_days(residuals, np.ones(n), data.x, ctx.design)
    else:
        offset = ctx.rhythm[data.day.weekday()] if ctx.rhythm else 0.0
        level = _self_starting_level(ctx, before)
        q = q_value(level, float(residuals.mean()) - offset) if level is not None else None
        if q is not None:  # a self-starting version: the day against all it knows so far
            last_u = q
        else:
            last_u = float(standardize_days([residuals.mean() - offset], [n],
                                            data.x.mean(axis=0)[None, :], ctx.design)[0])
        u = np.array([prewhiten(last_u, before.last_u, ctx.design.phi)])
    path = tabular_cusum(u, settings.cusum_k, ctx.limit(before), before.cusum)
    after = path.state
    total, steps = float(residuals.sum()), len(u)
    upper = _run_update(before.upper, before.cusum.upper_run, after.upper_run, steps, data.day,
                        total, n)
    lower = _run_update(before.lower, before.cusum.lower_run, after.lower_run, steps, data.day,
                        total, n)
    state = replace(before, cusum=after, upper=upper, lower=lower, last_u=last_u)
    return float(u[-1]) if len(u) == 1 else float(np.mean(u)), replace(carry, state=state)


def _self_starting_level(ctx: VersionContext, state: CheckState) -> Moments | None:
    """The level a self-starting version knows: its fit window's days and those it learned."""
    if ctx.learn_base is None:
        return None
    return ctx.learn_base.merge(state.learning.level)


def _learn(ctx: VersionContext, carry: Carry, data: DayInput, residuals: FloatArray,
           verdict: Verdict, watch_fraction: float) -> Carry:
    """A self-starting version learns today's level when the day had rows and its bias chart
    stands below the watch line (a sign of change pauses the learning, so a change is not
    learned); a ``refit`` stops it for good (until a restart), and so does reaching
    ``learn_until`` days."""
    learning = carry.state.learning
    if ctx.learn_base is None or learning.stopped or len(residuals) == 0:
        return carry
    chart = carry.state.cusum
    if verdict.status == Status.REFIT:
        learning = replace(learning, stopped=True)
    elif max(chart.upper, chart.lower) > watch_fraction * ctx.h:
        return carry
    elif ctx.learn_base.n + learning.level.n < ctx.learn_until:
        offset = ctx.rhythm[data.day.weekday()] if ctx.rhythm else 0.0
        learning = replace(learning, level=learned(learning.level,
                                                   float(residuals.mean()) - offset))
    else:
        return carry
    return replace(carry, state=replace(carry.state, learning=learning))


def _learn_slopes(ctx: VersionContext, carry: Carry, step: SlopeStep | None,
                  verdict: Verdict, watch_fraction: float, delay: int) -> Carry:
    """A learning slope reference takes in a day's slopes once ``delay`` later days with slopes
    have passed with every lane of the chart below the watch line and no ``refit`` (a sign of
    change drops the days held back and pauses the learning, so a change is not learned, even
    one too small to show in a day or two); a ``refit`` stops it until it is acknowledged.
    ``delay`` is the context's (:attr:`VersionContext.slope_learn_delay`)."""
    design = ctx.slope_chart
    learning = carry.state.learning
    if design is None or not design.learns or step is None or learning.stopped:
        return carry
    if verdict.status == Status.REFIT:
        learning = replace(learning, stopped=True, slope_pending=())
    else:
        sides = np.maximum(carry.state.slope_upper, carry.state.slope_lower)
        if (sides > watch_fraction * np.asarray(design.h)).any():
            if not learning.slope_pending:
                return carry
            learning = replace(learning, slope_pending=())
        else:
            pending = (*learning.slope_pending, day_slope_weights(step))
            weight, total, days = learning.slope_weight, learning.slope_sum, learning.slope_days
            while len(pending) > max(delay, 0):
                weight, total = learn_slopes(weight, total, pending[0])
                pending, days = pending[1:], days + 1
            learning = replace(learning, slope_weight=weight, slope_sum=total,
                               slope_days=days, slope_pending=pending)
    return replace(carry, state=replace(carry.state, learning=learning))


def _step_slope_chart(ctx: VersionContext, carry: Carry, data: DayInput
                      ) -> tuple[SlopeChartDay | None, SlopeStep | None, Carry]:
    """Move the within-day slope chart by this day's own slopes (a day without a usable slope
    leaves it where it stands); the leading side over its limit, and its onset day."""
    design = ctx.slope_chart
    if design is None:
        return None, None, carry
    k, lanes = design.k, design.lanes
    before = carry.state
    up0 = before.slope_upper if len(before.slope_upper) == lanes else (0.0,) * lanes
    lo0 = before.slope_lower if len(before.slope_lower) == lanes else (0.0,) * lanes
    learned = before.learning
    step = slope_step(design, data.x, data.y, learned.slope_weight, learned.slope_sum)
    up, lo = advance(up0, lo0, step)
    h = np.asarray(design.h)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratios = np.where(np.isfinite(h)[:, None], np.column_stack([up, lo]) / h[:, None], 0.0)
    j, side = np.unravel_index(int(np.argmax(ratios)), ratios.shape)
    value = (up, lo)[side][j]
    was = (up0, lo0)[side][j]
    onset = (None if value <= 0 else before.slope_onset if was > 0 and before.slope_onset
             else data.day)
    state = replace(before, slope_upper=up, slope_lower=lo, slope_onset=onset)
    nan = (float("nan"),) * k
    day = SlopeChartDay(z=step.z if step else nan, deviation=step.deviation if step else nan,
                        value=float(value), h=float(h[j]),
                        predictor=int(design.lane_predictor[j]),
                        upward=bool(side == 0))
    return day, step, replace(carry, state=state)


def _run_update(run: SideRun, before: int, after: int, steps: int, day: date, total: float,
                n: int) -> SideRun:
    """Onset day and residual sums of a CUSUM side's current run (none when it stands at 0).

    The run continues when it grew by exactly today's steps; otherwise it began today (for
    per-row steps: somewhere among today's rows, and the day is the onset's resolution).
    """
    if after == 0:
        return SideRun()
    if before > 0 and run.onset is not None and after == before + steps:
        return SideRun(run.onset, run.resid + total, run.rows + n)
    return SideRun(day, total, n)


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


def _since_change(ctx: VersionContext, history: DayMoments, not_before: date | None = None
                  ) -> tuple[date | None, DayMoments | None]:
    """The most likely single change day since monitoring began, and the days since it.

    The location of the largest Chow F over every day boundary from the end of the fit window
    to the last day (the sup-F location without trimming; Quandt 1960), computed from day
    statistics. Only a location: whether there is a change is for the signals to say. Once a
    refit stands, the day estimated when it was advised (``not_before``) is only refined
    forward by later days, never moved back into the old regime: a sup-F location from a longer
    sample tends to wander early when the old regime's days are many.
    """
    present = history.select(np.asarray(history.n) > 0)
    if len(present) < 2:
        return None, None
    sample = ctx.reference_days.then(present)
    first = max(len(ctx.reference_days) - 1, 0)
    if not_before is not None:
        boundary = int(np.searchsorted(np.asarray(sample.days), np.datetime64(not_before, "D")))
        first = max(first, boundary - 1)  # the first new day is not_before at the earliest
        if first >= len(sample) - 1:
            return not_before, None
    candidates = np.arange(first, len(sample) - 1)
    result = sup_f_test(sample, candidates)
    if result.location is None:
        return None, None
    first_new = as_date(result.first_new_day)
    return first_new, _days_from(present, first_new)


def _days_from(history: DayMoments, first: date) -> DayMoments | None:
    """The days with rows from ``first`` on, merged into one (None when there are none)."""
    after = history.select((np.asarray(history.n) > 0)
                           & (np.asarray(history.days) >= np.datetime64(first, "D")))
    if len(after) == 0:
        return None
    return DayMoments.stack([after.days[0]], [after.total()], after.dim)


def _slopes(window: Moments) -> FloatArray | None:
    try:
        return fit_moments(window).coef[1:]
    except DegenerateDataError:
        return None


def _spread(ctx: VersionContext, recent: DayMoments, days: tuple[CoverageDay, ...],
            window: int) -> SpreadTest | None:
    """The spread figures: the classical ratio always; the test on day spreads against the fit
    window's when the version has them (robust to heavy tails), else the variance-ratio F."""
    if int(np.asarray(recent.n).sum()) == 0:
        return None
    resid = day_residuals(recent, ctx.version.coefficients)
    classical = spread_test(resid, ctx.model.s, ctx.model.dof, ctx.sigma_w2, ctx.within_df)
    diagnosis = ctx.version.baseline.diagnosis
    if diagnosis is None or len(diagnosis.day_spreads) < MIN_SPREAD_DAYS:
        return classical
    last = days[-1].day
    fresh = [c.spread for c in days if c.spread is not None and (last - c.day).days < window]
    robust = robust_spread_test(fresh, diagnosis.day_spreads)
    if robust is None:
        return classical
    return SpreadTest(robust.ratio, robust.statistic, robust.df, float("inf"),
                      robust.pvalue, robust.pvalue_narrower, "day spreads")


def _wider_than_needed(ctx: VersionContext, coverage: float, span: str) -> str:
    """The notice for a window that covers more often than the in-control law expects."""
    diagnosis = ctx.version.baseline.diagnosis
    own = (f"; the fit window itself covered {percent(diagnosis.fit_coverage)}"
           if diagnosis is not None else "")
    return (f"intervals are wider than needed: {span} {percent(coverage)} of the rows fell "
            f"inside{own}. Reported only: it does not change the status (heavy "
            "tails or outliers at fit time make intervals wide for the other rows)")


def _details(verdict: Verdict, slope: FTest | None, classic: FTest | None,
             predictive: FTest | None, supf: SupF | None, spread: SpreadTest | None,
             shift_std: float, recent_fit: FloatArray | None, notes: list[str],
             slope_chart: SlopeChartDay | None) -> CheckDetails:
    summary = None if supf is None else SupFSummary(
        statistic=supf.statistic, pvalue=supf.pvalue, bound=supf.pvalue_bound, q=supf.q,
        lambda_bounds=(float(supf.lambda_bounds[0]), float(supf.lambda_bounds[1])),
        first_new_day=None if supf.first_new_day is None else as_date(supf.first_new_day))
    return CheckDetails(
        findings=verdict.findings, held=verdict.held, slope_decision=slope,
        slope_classic=classic, predictive_failure=predictive, supf=summary, spread=spread,
        recent_slopes=None if recent_fit is None else tuple(map(float, recent_fit)),
        shift_std=shift_std, notes=tuple(notes), slope_chart=slope_chart)


__all__ = ["DayInput", "VersionContext", "evaluate_day"]
