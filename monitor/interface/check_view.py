"""How a check run reads: the ``check --json`` document and the text a planning lead reads."""

from __future__ import annotations

from typing import Any

from monitor.domain.check import DayCheck
from monitor.domain.phrasing import fmt, fmt_p, percent
from monitor.monitoring.check import CheckOutcome


def day_document(c: DayCheck) -> dict[str, Any]:
    """One model-day of ``check --json`` (SPEC §6 fields first, then the rest)."""
    return {
        "model": c.model, "day": c.day, "n": c.n, "covered": c.covered,
        "coverage": c.coverage, "status": c.status, "since": c.status_since,
        "reasons": list(c.reasons),
        "cusum": {"upper": c.cusum_upper, "lower": c.cusum_lower, "h": c.cusum_h,
                  "signal": c.cusum_signal, "onset": c.cusum_onset, "shift": c.cusum_shift},
        "slope": {"statistic": c.slope_statistic, "pvalue": c.slope_pvalue,
                  "method": c.slope_method},
        "chow": {"statistic": c.chow_statistic, "pvalue": c.chow_pvalue},
        "window": {"n": c.window_n, "covered": c.window_covered,
                   "coverage": c.window_coverage, "wilson": [c.wilson_low, c.wilson_high],
                   "pvalue_low": c.coverage_p_low, "pvalue_high": c.coverage_p_high},
        "change_day": c.change_day,
        "supf": {"statistic": c.supf_statistic, "pvalue": c.supf_pvalue},
        "spread": {"ratio": c.spread_ratio, "pvalue": c.spread_pvalue},
        "extrapolated": c.extrapolated,
        "version_id": c.version_id,
    }


def check_document(outcome: CheckOutcome) -> list[dict[str, Any]]:
    return [day_document(c) for c in outcome.checks]


def day_line(c: DayCheck) -> str:
    cov = f"{percent(c.coverage)} inside" if c.coverage is not None else "no rows"
    return (f"{c.day}  {c.status.upper():5}  n={c.n:<4} {cov:>12}  "
            f"bias chart {fmt(max(c.cusum_upper, c.cusum_lower), 2)}/{fmt(c.cusum_h, 2)}  "
            f"slope {fmt_p(c.slope_pvalue)}")


def check_text(outcome: CheckOutcome) -> str:
    lines: list[str] = []
    for r in outcome.results:
        if r.error:
            lines.append(f"{r.model}: not checked: {r.error}")
            continue
        if r.reported_day is not None and not r.checks:
            why = f" ({r.note})" if r.note else ""
            lines.append(f"{r.model}: {r.reported_day} has not been checked{why}")
            continue
        if not r.checks:
            lines.append(f"{r.model}: nothing new to check ({r.note})")
            continue
        if r.reported_day is not None:
            done = "checked before, reported again" if r.checked_before else "checked now"
            head = f"{r.model}: {r.reported_day} ({done})"
        else:
            head = f"{r.model}: checked {r.first_day} .. {r.last_day} ({len(r.checks)} day(s))"
        if r.recomputed_from:
            head += f"; late rows made it re-check from {r.recomputed_from}"
        lines.append(head)
        for c in r.checks:
            lines.append("  " + day_line(c))
        last = r.checks[-1]
        when = f"on {last.day}" if r.reported_day is not None else "now"
        lines.append(f"  {when} {last.status.upper()} since {last.status_since}:")
        lines.extend(f"    - {reason}" for reason in last.reasons)
    if not lines:
        return "no models to check (fit one with 'fitwatch model fit NAME ...')"
    return "\n".join(lines)
