"""Day checks: the figures of one model-day, the state handed to the next day, and its details.

:class:`DayCheck` is what a night stores for each model and day (every figure of the check, the
status and its reasons). :class:`CheckState` is the part of it that the next day continues from
(the CUSUM sides and their runs, the day the windows were last restarted); :class:`Carry` adds
what is rebuilt from the neighbouring checks (status and the coverage window's days). All are
typed and frozen; ``monitor.store.checks`` serializes them in one place.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from datetime import date, datetime, timedelta

from monitor.domain.status import Status
from monitor.stats.change import FTest
from monitor.stats.cusum import CusumState
from monitor.stats.decision import Finding
from monitor.stats.self_start import Learning
from monitor.stats.spread import SpreadTest


@dataclass(frozen=True)
class SideRun:
    """The run of one CUSUM side: the day it left zero and the residuals summed since."""

    onset: date | None = None
    resid: float = 0.0  # sum of residuals since the onset (response units)
    rows: int = 0

    @property
    def mean(self) -> float:
        return self.resid / self.rows if self.rows else float("nan")


@dataclass(frozen=True)
class CheckState:
    """What a day check hands to the next day (stored with the check)."""

    cusum: CusumState = field(default_factory=CusumState.zero)
    upper: SideRun = field(default_factory=SideRun)
    lower: SideRun = field(default_factory=SideRun)
    fresh_from: date | None = None  # windows count days from here (the last restart), if set
    last_u: float | None = None  # the latest standardized day mean (the chart prewhitens by it)
    day_spread: float | None = None  # this day's log day spread (the robust spread test's unit)
    clean_days: int = 0  # days in a row without a finding, up to this one
    slope_upper: tuple[float, ...] = ()  # within-day slope chart, one value per lane
    slope_lower: tuple[float, ...] = ()
    slope_onset: date | None = None  # the day the leading slope side last left zero
    advised_change: date | None = None  # the change day estimated when the standing refit began
    learning: Learning = field(default_factory=Learning)  # a self-starting version's own days


@dataclass(frozen=True)
class CoverageDay:
    """One day of the rolling coverage window."""

    day: date
    rows: int
    covered: int
    spread: float | None = None  # log day spread (monitor.stats.diagnosis.day_spread)


def coverage_span(day: date, window_days: int, fresh_from: date | None) -> tuple[date, int]:
    """The first day of the rolling coverage window that ends on ``day``, and how many days it
    holds: ``window_days``, or fewer while the last restart (``fresh_from``: a version took
    over or the advice was acknowledged) lies inside it, since the window counts no day before.
    """
    first = day - timedelta(days=window_days - 1)
    if fresh_from is not None and fresh_from > first:
        first = fresh_from
    return first, (day - first).days + 1


@dataclass(frozen=True)
class Carry:
    """Everything the next day continues from: the stored state, the status, the window's days."""

    state: CheckState
    status: Status
    status_since: date | None
    coverage_days: tuple[CoverageDay, ...]  # oldest first

    @classmethod
    def initial(cls) -> Carry:
        return cls(CheckState(), Status.OK, None, ())

    @classmethod
    def after(cls, check: DayCheck, window: tuple[CoverageDay, ...]) -> Carry:
        """The carry after a stored check; ``window`` holds the coverage days up to it."""
        fresh = check.state.fresh_from
        kept = tuple(c for c in window if fresh is None or c.day >= fresh)
        return cls(check.state, check.status, check.status_since, kept)

    @property
    def fresh_from(self) -> date | None:
        return self.state.fresh_from

    def restarted(self, day: date, *, same_version: bool = False) -> Carry:
        """Everything starts afresh on ``day`` (a promotion or an acknowledgement takes effect).

        The CUSUM is back at zero, a held refit is released, the status starts anew (its
        "since" is the restart day at the earliest), and the coverage and test windows count
        only days from ``day``: evidence that was acted upon is not counted twice. Under the
        same version (an acknowledgement) the chart's prewhitening still knows yesterday's day
        mean, and a self-starting version keeps what it learned and learns on; a new version
        starts without either.
        """
        if not same_version:
            return Carry(CheckState(fresh_from=day), Status.OK, None, ())
        was = self.state.learning
        learned = Learning(was.level, slope_weight=was.slope_weight, slope_sum=was.slope_sum,
                           slope_days=was.slope_days)
        return Carry(CheckState(fresh_from=day, last_u=self.state.last_u, learning=learned),
                     Status.OK, None, ())


@dataclass(frozen=True)
class SupFSummary:
    """The stored part of a sup-F test (its path is not kept)."""

    statistic: float
    pvalue: float
    bound: str | None
    q: int
    lambda_bounds: tuple[float, float]
    first_new_day: date | None


@dataclass(frozen=True)
class SlopeChartDay:
    """The within-day slope chart on one day, per predictor (NaN where the day gave no step)."""

    z: tuple[float, ...]  # the day's standardized slope deviation
    deviation: tuple[float, ...]  # the day's own slope minus the version's within-day slope
    value: float  # the leading side's value
    h: float  # its decision interval
    predictor: int  # which predictor leads (0-based)
    upward: bool  # the leading side is the upper one


@dataclass(frozen=True)
class CheckDetails:
    """The figures behind a day's verdict that have no column of their own."""

    findings: tuple[Finding, ...] = ()
    held: bool = False  # a refit from an earlier day still stands
    slope_decision: FTest | None = None
    slope_classic: FTest | None = None
    predictive_failure: FTest | None = None
    supf: SupFSummary | None = None
    spread: SpreadTest | None = None
    recent_slopes: tuple[float, ...] | None = None
    shift_std: float = float("nan")  # Montgomery's shift estimate, standardized units
    notes: tuple[str, ...] = ()
    slope_chart: SlopeChartDay | None = None


@dataclass(frozen=True)
class DayCheck:
    """The stored result of checking one model on one day."""

    model_id: int
    day: date
    version_id: int
    stats_revision: int  # the day_stats revision that was checked (0: no rows)
    n: int
    covered: int
    extrapolated: int
    coverage: float | None
    mean_residual: float | None
    window_n: int
    window_covered: int
    window_coverage: float | None
    wilson_low: float | None
    wilson_high: float | None
    coverage_p_low: float | None
    coverage_p_high: float | None
    cusum_u: float | None
    cusum_upper: float
    cusum_lower: float
    cusum_upper_run: int
    cusum_lower_run: int
    cusum_h: float
    cusum_signal: bool
    cusum_onset: date | None
    cusum_shift: float | None
    slope_statistic: float | None
    slope_pvalue: float | None
    slope_method: str | None
    chow_statistic: float | None
    chow_pvalue: float | None
    change_day: date | None
    supf_statistic: float | None
    supf_pvalue: float | None
    spread_ratio: float | None
    spread_pvalue: float | None
    status: Status
    status_since: date
    reasons: tuple[str, ...]
    details: CheckDetails
    state: CheckState
    checked_at: datetime
    model: str = field(default="", compare=False)  # the model's name, for reading

    @property
    def coverage_day(self) -> CoverageDay:
        return CoverageDay(self.day, self.n, self.covered, self.state.day_spread)

    @property
    def cusum_value(self) -> float:
        """The leading side of the bias chart."""
        return max(self.cusum_upper, self.cusum_lower)

    def named(self, model: str) -> DayCheck:
        return replace(self, model=model)
