"""How a check run reads: the ``check --json`` document and the text a planning lead reads."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from monitor.domain.check import DayCheck
from monitor.domain.data_health import DataHealth
from monitor.domain.phrasing import fmt, fmt_p, percent
from monitor.monitoring.check import CheckOutcome, ModelCheck


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


def check_text(outcome: CheckOutcome, health: Sequence[DataHealth] = ()) -> str:
    """The run for people; ``health``: the checked models' standing data findings."""
    lines: list[str] = []
    data = {h.model: h for h in health if h.stands}
    for r in outcome.results:
        lines.extend(_check_lines(r))
        if r.model in data:
            lines.extend(f"  ! data: {sentence}" for sentence in data[r.model].sentences())
    return "\n".join(lines)


def _check_lines(r: ModelCheck) -> list[str]:
    if r.error:
        return [f"{r.model}: not checked: {r.error}"]
    if not r.checks:
        return [f"{r.model}: nothing new to check ({r.note})"]
    head = f"{r.model}: checked {r.first_day} .. {r.last_day} ({len(r.checks)} day(s))"
    if r.recomputed_from:
        head += f"; late rows made it re-check from {r.recomputed_from}"
    last = r.checks[-1]
    return [head, *("  " + day_line(c) for c in r.checks),
            f"  now {last.status.upper()} since {last.status_since}:",
            *(f"    - {reason}" for reason in last.reasons)]
