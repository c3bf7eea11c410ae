"""How checks read: the ``check --json`` document and the text a planning lead reads, and the
stored figures of past checks as a time series (``days``: text, JSON and CSV)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any
from zoneinfo import ZoneInfo

from monitor.domain.check import DayCheck
from monitor.domain.data_health import DataHealth
from monitor.domain.phrasing import fmt, fmt_p, percent
from monitor.interface.output import csv_text
from monitor.monitoring.check import CheckOutcome, ModelCheck
from monitor.monitoring.daily_figures import CheckedDay


def day_document(c: DayCheck) -> dict[str, Any]:
    """One model-day of ``check --json`` (the day's status and figures first, then the rest)."""
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
    if not lines:
        return "no models to check (fit one with 'fitwatch model fit NAME ...')"
    return "\n".join(lines)


def _check_lines(r: ModelCheck) -> list[str]:
    if r.error:
        return [f"{r.model}: not checked: {r.error}"]
    if r.reported_day is not None and not r.checks:
        why = f" ({r.note})" if r.note else ""
        return [f"{r.model}: {r.reported_day} has not been checked{why}"]
    if not r.checks:
        return [f"{r.model}: nothing new to check ({r.note})"]
    if r.reported_day is not None:
        done = "checked before, reported again" if r.checked_before else "checked now"
        head = f"{r.model}: {r.reported_day} ({done})"
    else:
        head = f"{r.model}: checked {r.first_day} .. {r.last_day} ({len(r.checks)} day(s))"
    if r.recomputed_from:
        head += (f"; rows that came late or were corrected made it check again from "
                 f"{r.recomputed_from}")
    last = r.checks[-1]
    when = f"on {last.day}" if r.reported_day is not None else "now"
    return [head, *("  " + day_line(c) for c in r.checks),
            f"  {when} {last.status.upper()} since {last.status_since}:",
            *(f"    - {reason}" for reason in last.reasons)]


# the stored figures of past checks (``days``) -------------------------------------------------
FIGURE_COLUMNS = (
    "model", "day", "version", "status", "since", "n", "covered", "missed", "coverage",
    "extrapolated", "window_n", "window_covered", "window_coverage", "window_wilson_low",
    "window_wilson_high", "window_pvalue_low", "window_pvalue_high", "cusum_value",
    "cusum_upper", "cusum_lower", "cusum_h", "cusum_signal", "cusum_onset", "cusum_shift",
    "slope_chart_value", "slope_chart_h", "slope_statistic", "slope_pvalue", "slope_method",
    "chow_statistic", "chow_pvalue", "supf_statistic", "supf_pvalue", "change_day",
    "spread_ratio", "spread_pvalue", "reasons", "checked_at")


def figures_document(day: CheckedDay, zone: ZoneInfo) -> dict[str, Any]:
    """One model-day of ``days --json``: the ``check --json`` entry with the version's number,
    the misses, the leading value of each chart and when the day was checked (in ``zone``)."""
    c = day.check
    doc = day_document(c)
    doc.pop("version_id")
    chart = c.details.slope_chart
    return {"model": doc.pop("model"), "day": doc.pop("day"), "version": day.version,
            "status": doc.pop("status"), "since": doc.pop("since"), "n": doc.pop("n"),
            "covered": doc.pop("covered"), "missed": c.n - c.covered, **doc,
            "cusum": {"value": c.cusum_value, **doc["cusum"]},
            "slope_chart": {"value": chart.value if chart else None,
                            "h": chart.h if chart else None},
            "checked_at": c.checked_at.astimezone(zone)}


def figures_record(day: CheckedDay, zone: ZoneInfo) -> dict[str, Any]:
    """One CSV row of ``days --csv``: the JSON entry flattened (``cusum.h`` -> ``cusum_h``)."""
    doc = figures_document(day, zone)
    low, high = doc["window"].pop("wilson")
    doc["window"].update(wilson_low=low, wilson_high=high)
    flat: dict[str, Any] = {}
    for key, value in doc.items():
        if isinstance(value, dict):
            flat.update({f"{key}_{inner}": v for inner, v in value.items()})
        else:
            flat[key] = value
    return {column: flat[column] for column in FIGURE_COLUMNS}


def figures_csv(days: list[CheckedDay], zone: ZoneInfo) -> str:
    return csv_text(FIGURE_COLUMNS, (figures_record(d, zone) for d in days))


def figures_text(days: list[CheckedDay]) -> str:
    if not days:
        return "no checked days (in the range asked for)"
    out: list[str] = []
    model = None
    for d in days:
        if d.check.model != model:
            model = d.check.model
            out.append(f"{model}:")
        out.append(f"  {day_line(d.check)}  v{d.version}")
    return "\n".join(out)
