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
    SupFSummary,
)
from monitor.domain.days import as_date
from monitor.domain.phrasing import percent
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
from monitor.stats.spread import SpreadTest, spread_test

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
    cov = (ctx.misses.test([c.rows for c in recent_cov], w_cov, level, ctx.dispersion)
           if w_rows else None)
    carry = replace(carry, coverage_days=carried,
                    state=replace(carry.state, day_spread=today.spread))
    cusum_u, carry = _step_cusum(ctx, carry, data, residuals, settings)
    state = carry.state.cusum
    lead = _Leading.of(carry.state, settings.cusum_k)

    # slope, change date, spread over the recent window ------------------------------------
    with _quiet() as notes:
        slope, chow, classic, predictive, supf, recent_fit = _change_tests(ctx, data.recent_days)
        spread = _spread(ctx, data.recent_days, carried, settings.test_window_days)

    if cov is not None and cov.pvalue_high < settings.watch_pvalue:
        notes.append(_wider_than_needed(ctx, cov.coverage, window))
    evidence = Evidence(
        coverage_pvalue_low=cov.pvalue_low if cov else float("nan"),
        coverage_pvalue_high=cov.pvalue_high if cov else float("nan"),
        cusum_upper=state.upper, cusum_lower=state.lower, cusum_h=ctx.h,
        slope_pvalue=slope.pvalue if slope else float("nan"),
        spread_pvalue=spread.pvalue if spread else float("nan"),
    )
    policy = Policy(settings.refit_pvalue, settings.watch_pvalue, settings.watch_cusum_fraction)
    verdict = decide(evidence, policy, refit_held=carry.status == Status.REFIT)
    clean = carry.state.clean_days + 1 if not verdict.findings else 0
    watch_held = (verdict.status == Status.OK and carry.status == Status.WATCH
                  and clean < settings.watch_clear_days)
    if watch_held:
        verdict = replace(verdict, status=Status.WATCH)
    carry = replace(carry, state=replace(carry.state, clean_days=clean))

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
        status=verdict.status, status_since=since, reasons=tuple(reasons),
        details=_details(verdict, slope, classic, predictive, supf, spread, lead.shift_std,
                         recent_fit, notes),
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
        day_u = standardize_days([residuals.mean()], [n], data.x.mean(axis=0)[None, :],
                                 ctx.design)
        last_u = float(day_u[0])
        u = np.array([prewhiten(last_u, before.last_u, ctx.design.phi)])
    path = tabular_cusum(u, settings.cusum_k, ctx.h, before.cusum)
    after = path.state
    total, steps = float(residuals.sum()), len(u)
    upper = _run_update(before.upper, before.cusum.upper_run, after.upper_run, steps, data.day,
                        total, n)
    lower = _run_update(before.lower, before.cusum.lower_run, after.lower_run, steps, data.day,
                        total, n)
    state = replace(before, cusum=after, upper=upper, lower=lower, last_u=last_u)
    return float(u[-1]) if len(u) == 1 else float(np.mean(u)), replace(carry, state=state)


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


def _wider_than_needed(ctx: VersionContext, coverage: float, window: int) -> str:
    """The notice for a window that covers more often than the in-control law expects."""
    diagnosis = ctx.version.baseline.diagnosis
    own = (f"; the fit window itself covered {percent(diagnosis.fit_coverage)}"
           if diagnosis is not None else "")
    return (f"intervals are wider than needed: {percent(coverage)} of the last {window} days' "
            f"rows fell inside{own}. Reported only: it does not change the status (heavy "
            "tails or outliers at fit time make intervals wide for the other rows)")


def _details(verdict: Verdict, slope: FTest | None, classic: FTest | None,
             predictive: FTest | None, supf: SupF | None, spread: SpreadTest | None,
             shift_std: float, recent_fit: FloatArray | None, notes: list[str]) -> CheckDetails:
    summary = None if supf is None else SupFSummary(
        statistic=supf.statistic, pvalue=supf.pvalue, bound=supf.pvalue_bound, q=supf.q,
        lambda_bounds=(float(supf.lambda_bounds[0]), float(supf.lambda_bounds[1])),
        first_new_day=None if supf.first_new_day is None else as_date(supf.first_new_day))
    return CheckDetails(
        findings=verdict.findings, held=verdict.held, slope_decision=slope,
        slope_classic=classic, predictive_failure=predictive, supf=summary, spread=spread,
        recent_slopes=None if recent_fit is None else tuple(map(float, recent_fit)),
        shift_std=shift_std, notes=tuple(notes))


__all__ = ["DayInput", "VersionContext", "evaluate_day"]
