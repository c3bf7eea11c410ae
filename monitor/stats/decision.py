"""The decision: one day's evidence in, ``ok`` / ``watch`` / ``refit`` with its findings out.

Default policy (README, "What the figures mean"): ``refit`` when the bias CUSUM or the
within-day slope chart signals, or the slope test has p < 0.001, or coverage is low at p <
0.001; ``watch`` when any signal has p below the watch level or a chart stands above its watch
fraction of the limit; otherwise ``ok``. Intervals that cover more often than the fit window's
law expects are reported by the caller, not raised to ``watch``: on heavy-tailed or outlying
rows the classical intervals are wide for the other rows, which is no change of the process.
A ``refit`` holds until a promotion or an acknowledgement (the caller says whether one is
held). Findings carry the figures; turning them into sentences in the model's units is the
job of :mod:`monitor.monitoring.wording`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from monitor.domain.status import Status


@dataclass(frozen=True)
class Policy:
    refit_pvalue: float = 0.001
    watch_pvalue: float = 0.01
    watch_cusum_fraction: float = 0.5

    def __post_init__(self) -> None:
        if not 0 < self.refit_pvalue <= self.watch_pvalue < 1:
            raise ValueError("need 0 < refit_pvalue <= watch_pvalue < 1")
        if not 0 < self.watch_cusum_fraction < 1:
            raise ValueError("watch_cusum_fraction must lie in (0, 1)")


@dataclass(frozen=True)
class Evidence:
    """The signals of one day check; NaN where a signal could not be computed."""

    coverage_pvalue_low: float
    coverage_pvalue_high: float
    cusum_upper: float
    cusum_lower: float
    cusum_h: float
    slope_pvalue: float
    spread_pvalue: float
    slope_chart_ratio: float = float("nan")  # within-day slope chart over its limit (leading)


@dataclass(frozen=True)
class Finding:
    signal: str  # coverage | bias | slope | spread
    level: Status  # watch | refit
    kind: str  # low | high | upper | lower | changed | wider


@dataclass(frozen=True)
class Verdict:
    status: Status
    findings: tuple[Finding, ...]
    held: bool  # a refit from an earlier day still stands


def _below(p: float, threshold: float) -> bool:
    return not math.isnan(p) and p < threshold


def decide(evidence: Evidence, policy: Policy = Policy(), *, refit_held: bool = False) -> Verdict:
    """Status and findings for one day under ``policy``."""
    found: list[Finding] = []

    def by_p(signal: str, kind: str, p: float, refit_allowed: bool) -> None:
        if refit_allowed and _below(p, policy.refit_pvalue):
            found.append(Finding(signal, Status.REFIT, kind))
        elif _below(p, policy.watch_pvalue):
            found.append(Finding(signal, Status.WATCH, kind))

    e = evidence
    if e.cusum_upper > e.cusum_h or e.cusum_lower > e.cusum_h:
        side = "upper" if e.cusum_upper >= e.cusum_lower else "lower"
        found.append(Finding("bias", Status.REFIT, side))
    elif max(e.cusum_upper, e.cusum_lower) > policy.watch_cusum_fraction * e.cusum_h:
        side = "upper" if e.cusum_upper >= e.cusum_lower else "lower"
        found.append(Finding("bias", Status.WATCH, side))
    by_p("slope", "changed", e.slope_pvalue, refit_allowed=True)
    chart = e.slope_chart_ratio
    level = (Status.REFIT if chart > 1 else Status.WATCH if chart > policy.watch_cusum_fraction
             else None)
    if level is not None:  # the within-day chart speaks when it is the stronger slope evidence
        test = next((f for f in found if f.signal == "slope"), None)
        if test is None or level.rank > test.level.rank:
            if test is not None:
                found.remove(test)
            found.append(Finding("slope", level, "within"))
    by_p("coverage", "low", e.coverage_pvalue_low, refit_allowed=True)
    by_p("spread", "wider", e.spread_pvalue, refit_allowed=False)

    found.sort(key=lambda f: -f.level.rank)
    status = max((f.level for f in found), key=lambda s: s.rank, default=Status.OK)
    if refit_held:
        status = Status.REFIT
    return Verdict(status, tuple(found), held=refit_held)
