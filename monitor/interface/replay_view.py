"""How ``replay`` reads: the ``--json`` document and the text summary."""

from __future__ import annotations

from typing import Any

from monitor.domain.phrasing import fmt
from monitor.domain.status import ALERTING, Status
from monitor.interface.check_view import day_document
from monitor.interface.versions import version_document
from monitor.monitoring.replay import ReplayReport


def replay_document(report: ReplayReport) -> dict[str, Any]:
    rows = report.rows
    return {
        "model": report.model.name, "source": rows.source,
        "rows": {"read": rows.read, "used": rows.accepted, "duplicates": rows.duplicates,
                 "rejected": rows.rejected, "reasons": dict(rows.reasons)},
        "version": version_document(report.model, report.version),
        "days": len(report.checks), "status_days": report.counts(),
        "acknowledge_refits": report.acknowledged,
        "episodes": [{"status": e.status, "first_day": e.first_day, "last_day": e.last_day,
                      "days": e.days, "reasons": list(e.reasons)}
                     for s in ALERTING for e in report.episodes(s)],
        "checks": [day_document(c) for c in report.checks],
    }


def replay_text(report: ReplayReport) -> str:
    r, f = report.rows, report.fitted.fit
    terms = " + ".join(fmt(v, 4) + ("" if t == "intercept" else f" × {t}")
                       for t, v in zip(f.terms, f.coef, strict=True))
    lines = [
        f"replay of {report.model.name} on {r.source}: {r.read:,} rows read, {r.accepted:,} "
        f"used, {r.duplicates:,} duplicates, {r.rejected:,} rejected",
        f"fitted on {report.fitted.first_day} .. {report.fitted.last_day}: "
        f"{report.model.response} = {terms} (s = {fmt(f.s, 4)}, bias chart limit "
        f"{fmt(report.version.cusum_h, 3)})",
    ]
    if not report.checks:
        lines.append("no days after the fit window to check")
        return "\n".join(lines)
    counts = report.counts()
    refits, watches = report.episodes(Status.REFIT), report.episodes(Status.WATCH)
    lines.append(
        f"checked {report.checks[0].day} .. {report.checks[-1].day} ({len(report.checks)} "
        f"days): {counts[Status.OK]} ok, {counts[Status.WATCH]} watch, "
        f"{counts[Status.REFIT]} refit; {len(refits)} refit and {len(watches)} watch "
        "episode(s)" + (" (each refit acknowledged the next day)" if report.acknowledged
                        else ""))
    for e in sorted(refits + watches, key=lambda e: e.first_day):
        lines.append(f"  {e.first_day} {e.status.upper()} for {e.days} day(s):")
        lines.extend(f"    - {reason}" for reason in e.reasons)
    return "\n".join(lines)
