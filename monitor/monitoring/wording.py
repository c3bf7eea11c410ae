"""Reasons as sentences a planning lead reads: in the model's own units, with the numbers."""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date

import numpy as np
from numpy.typing import NDArray

from monitor.config import Wording
from monitor.domain.check import SlopeChartDay
from monitor.domain.phrasing import amount, fmt, fmt_p, held_reason, percent, window_span
from monitor.stats.change import FTest
from monitor.stats.coverage import CoverageTest
from monitor.stats.decision import Finding, Verdict
from monitor.stats.spread import SpreadTest


@dataclass(frozen=True, eq=False)
class Figures:
    """The numbers behind one day's verdict."""

    day: date
    level: float
    n: int
    covered: int
    window_days: int
    window: CoverageTest | None
    cusum_shift: float  # mean residual since the leading run began (response units)
    cusum_onset: date | None
    h: float
    cusum_value: float  # the leading side's value
    change_day: date | None
    old_slopes: NDArray[np.float64]
    new_slopes: NDArray[np.float64] | None
    predictors: tuple[str, ...]
    slope: FTest | None
    spread: SpreadTest | None
    since: date
    held_since: date | None
    slope_chart: SlopeChartDay | None = None
    slope_onset: date | None = None  # the within-day slope chart's run began on this day
    extrapolated: int = 0  # rows with a predictor outside the fit window's range
    typical_x: NDArray[np.float64] | None = None  # the fit window's mean of each predictor
    window_first: date | None = None  # the coverage window's first day ...
    window_held: int | None = None  # ... and its days (fewer than window_days after a restart)
    window_version: int | None = None  # the version whose takeover restarted the window


def _about(day: date | None) -> str:
    return f" since about {day.isoformat()}" if day else ""


def _coverage_today(f: Figures, words: Wording) -> str:
    if f.n == 0:
        return f"no {words.rows} were recorded on {f.day.isoformat()}"
    noun = words.row if f.n == 1 else words.rows
    text = (f"{percent(f.covered / f.n)} of the {f.n} {noun} on {f.day.isoformat()} fell inside "
            f"the {percent(f.level)} interval")
    if f.extrapolated:
        some = "it lay" if f.n == 1 else ("all of them lay" if f.extrapolated == f.n else
                                          f"{f.extrapolated} of them lay")
        text += f" ({some} outside the range the line was fitted on: planned by extending it)"
    return text


def _window(f: Figures, words: Wording) -> str:
    w = f.window
    if w is None:
        return ""
    span = window_span(f.window_held or f.window_days, f.window_days, f.window_first or f.day,
                       f.window_version)
    return (f"{span} {percent(w.coverage)} of {w.n} {words.rows} did "
            f"(plausible range {percent(w.wilson_low)}–{percent(w.wilson_high)})")


def _bias(finding: Finding, f: Figures, words: Wording, response: str) -> str:
    direction = "above" if finding.kind == "upper" else "below"
    if math.isfinite(f.cusum_shift):
        lead = (f"{words.rows} have run {amount(f.cusum_shift, words, response)} {direction} "
                f"plan on average{_about(f.cusum_onset)}")
    else:
        lead = f"{words.rows} run {direction} plan"
    if finding.level == "refit":
        return (f"{lead}; the bias chart stands at {fmt(f.cusum_value, 2)}, over its limit of "
                f"{fmt(f.h, 2)}")
    return (f"{lead}; the bias chart stands at {fmt(f.cusum_value, 2)}, nearing its limit of "
            f"{fmt(f.h, 2)}")


def _slopes(finding: Finding, f: Figures, words: Wording, response: str) -> str:
    test = f"slope test {fmt_p(f.slope.pvalue if f.slope else None)}"
    change_day = f.change_day
    if finding.kind == "within" and f.slope_chart is not None:
        c = f.slope_chart
        where = "over" if finding.level == "refit" else "nearing"
        test = (f"the rows of each day, compared within the day, show it: the within-day slope "
                f"chart stands at {fmt(c.value, 2)}, {where} its limit of {fmt(c.h, 2)}")
        change_day = change_day or f.slope_onset
    if f.new_slopes is None:
        return f"the slope has changed{_about(change_day)} ({test})"
    parts = []
    for name, old, new in zip(f.predictors, f.old_slopes, f.new_slopes, strict=True):
        change = (new - old) / abs(old) if old else math.nan
        pct = f" ({change * 100:+.0f} %)" if math.isfinite(change) else ""
        adds = f"{fmt(new, 3)} {words.y_unit}" if words.y_unit else f"{fmt(new, 3)} to {response}"
        parts.append(f"each {words.x_unit(name)} now adds {adds} instead of {fmt(old, 3)}{pct}")
    return "; ".join(parts) + f"{_about(change_day)} ({test})"


def _finding(finding: Finding, f: Figures, words: Wording, response: str) -> str:
    if finding.signal == "bias":
        return _bias(finding, f, words, response)
    if finding.signal == "slope":
        return _slopes(finding, f, words, response)
    if finding.signal == "coverage" and f.window is not None:
        if finding.kind == "low":
            return (f"intervals cover too rarely: {_window(f, words)}, "
                    f"{fmt_p(f.window.pvalue_low)}")
        return (f"intervals are wider than needed: {_window(f, words)}, "
                f"{fmt_p(f.window.pvalue_high)}")
    if finding.signal == "spread" and f.spread is not None:
        return (f"the scatter around the line is {percent(f.spread.ratio - 1)} wider than at the "
                f"fit ({fmt_p(f.spread.pvalue)})")
    return f"{finding.signal} signal ({finding.level})"


def plan_terms(verdict: Verdict, f: Figures, words: Wording, response: str) -> str | None:
    """What the findings mean for plans, in the model's units: for a bias or slope finding, how
    far a typical row (the fit window's mean of each predictor) now runs from plan, signed,
    and how much more or less each unit of a predictor adds than planned; for coverage or
    spread alone, how often rows fall outside their planned range. None without a finding."""
    signals = {x.signal for x in verdict.findings}
    if not signals & {"bias", "slope"}:
        return _range_terms(verdict, f, words)
    parts = []
    if math.isfinite(f.cusum_shift) and f.cusum_shift != 0:
        side = "above" if f.cusum_shift > 0 else "below"
        at = ""
        if f.typical_x is not None and len(f.typical_x) == len(f.predictors):
            at = " (" + ", ".join(f"{name} ≈ {fmt(float(v), 2)}" for name, v in
                                  zip(f.predictors, f.typical_x, strict=True)) + ")"
        parts.append(f"a typical {words.row}{at} now runs about "
                     f"{amount(f.cusum_shift, words, response)} {side} plan")
    if f.new_slopes is not None:
        for name, old, new in zip(f.predictors, f.old_slopes, f.new_slopes, strict=True):
            if not (math.isfinite(old) and math.isfinite(new)) or new == old:
                continue
            more = "more" if new > old else "less"
            parts.append(f"each {words.x_unit(name)} adds about "
                         f"{amount(new - old, words, response)} {more} than planned")
    if not parts:
        return None
    return _capital("in plan terms: " + "; ".join(parts))


def _range_terms(verdict: Verdict, f: Figures, words: Wording) -> str | None:
    """Coverage or spread findings in plan terms: the planned ranges are too narrow or wide."""
    outside = 1 - f.level
    for x in verdict.findings:
        if x.signal == "coverage" and x.kind == "low" and f.window is not None:
            return _capital(f"in plan terms: {percent(1 - f.window.coverage)} of {words.rows} "
                            f"now fall outside their planned range, where the plans allow for "
                            f"{percent(outside)}")
        if x.signal == "coverage" and x.kind == "high" and f.window is not None:
            return _capital(f"in plan terms: only {percent(1 - f.window.coverage)} of "
                            f"{words.rows} fall outside their planned range, where the plans "
                            f"allow for {percent(outside)}: the ranges carry more slack than "
                            "needed")
        if x.signal == "spread" and f.spread is not None:
            return _capital(f"in plan terms: {words.rows} scatter "
                            f"{percent(f.spread.ratio - 1)} more around plan than when it was "
                            "fitted, so the planned ranges are too narrow")
    return None


def reasons_for(verdict: Verdict, f: Figures, words: Wording, response: str) -> list[str]:
    """The day's reasons, strongest first, led by what they mean for plans; an ``ok`` day says
    what was seen. A day's own coverage is a reason only when it supports the finding (below
    the level, or no rows)."""
    out = []
    plain = plan_terms(verdict, f, words, response)
    if plain is not None:
        out.append(plain)
    if verdict.held:
        out.append(held_reason(f.held_since))
    out.extend(_capital(_finding(x, f, words, response)) for x in verdict.findings)
    today = _coverage_today(f, words)
    if not verdict.findings:
        chart = (f"the bias chart stands at {fmt(f.cusum_value, 2)} of its limit {fmt(f.h, 2)}"
                 if f.cusum_value > 0 else "the bias chart is at zero")
        out.append(_capital(f"no sign of change: {today}; {chart}"))
    elif f.n == 0 or f.covered / f.n < f.level:
        out.append(_capital(today))
    return out


def _capital(text: str) -> str:
    return text[:1].upper() + text[1:] if text else text
