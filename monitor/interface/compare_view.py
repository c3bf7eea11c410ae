"""How ``refit`` and ``compare`` read: the ``--json`` document and the text for people."""

from __future__ import annotations

from datetime import date
from typing import Any

from monitor.domain.phrasing import fmt, fmt_p, percent
from monitor.domain.version import Version
from monitor.interface.versions import version_document
from monitor.lifecycle.compare import Comparison
from monitor.stats.holdout import HoldoutScore


def comparison_document(result: Comparison) -> dict[str, Any]:
    """The ``refit --json`` / ``compare --json`` document."""
    loss = result.loss
    return {
        "model": result.model.name,
        "active": version_document(result.model, result.active),
        "candidate": version_document(result.model, result.candidate),
        "holdout": {
            "first_day": result.holdout[0] if result.holdout else None,
            "last_day": result.holdout[1] if result.holdout else None,
            "candidate_evaluated_as": result.evaluated_as,
            "candidate_evaluation_window": (list(result.evaluation_window)
                                            if result.evaluation_window else None),
            "active": result.active_score.as_dict() if result.active_score else None,
            "candidate": result.candidate_score.as_dict() if result.candidate_score else None,
            "loss_difference": None if loss is None else {
                "statistic": loss.statistic, "pvalue": loss.pvalue, "df": loss.df,
                "mean_difference": loss.mean_difference},
        },
        "recommendation": {"action": result.recommendation.action,
                           "sentence": result.recommendation.sentence,
                           "command": result.recommendation.command},
    }


def comparison_text(result: Comparison) -> str:
    """Both versions side by side, the held-out figures and the recommendation."""
    active, cand = result.active, result.candidate
    lines = [f"{result.model.name}: active version {active.number} against candidate version "
             f"{cand.number} (fitted on {_window(cand)}, {cand.line.n} rows)"]
    for i, term in enumerate(active.terms):
        lines.append(f"  {term:<14} {fmt(float(active.coefficients[i]), 4):>12} -> "
                     f"{fmt(float(cand.coefficients[i]), 4)}")
    lines.append(f"  {'s':<14} {fmt(active.line.s, 4):>12} -> {fmt(cand.line.s, 4)}")
    wide = (cand.cusum_h or 0) > 1.5 * (active.cusum_h or float("inf"))
    lines.append(f"  {'chart limit h':<14} {fmt(active.cusum_h, 3):>12} -> "
                 f"{fmt(cand.cusum_h, 3)}"
                 + ("\n  (a short window pins the candidate down loosely, so its bias "
                    "chart needs a wider limit; it sharpens with a longer window)" if wide else ""))
    a_score, c_score = result.active_score, result.candidate_score
    if result.holdout and a_score and c_score:
        how = ("refitted on " + _days(result.evaluation_window)
               if result.evaluated_as == "refitted" else "as stored")
        lines.append(f"held out {_days(result.holdout)} ({a_score.days} days, "
                     f"{a_score.n} rows); candidate {how}:")
        lines.append(f"  {'':<20}{'active v' + str(active.number):>14}"
                     f"{'candidate v' + str(cand.number):>16}")
        for label, key in (("interval coverage", "coverage"), ("bias", "bias"),
                           ("RMSE", "rmse"), ("interval width", "mean_width")):
            lines.append(f"  {label:<20}{_cell(a_score, key, result.unit):>14}"
                         f"{_cell(c_score, key, result.unit):>16}")
        lines.append(f"  (target coverage {percent(active.level, 1)}; smaller errors: "
                     f"{fmt_p(result.loss.pvalue if result.loss else None)})")
    lines.append(f"recommendation: {result.recommendation.action}. "
                 f"{result.recommendation.sentence}")
    if result.recommendation.command:
        lines.append(f"next: {result.recommendation.command}")
    return "\n".join(lines)


def _cell(score: HoldoutScore, key: str, unit: str) -> str:
    if key == "coverage":
        return percent(score.coverage.coverage, 1)
    value = getattr(score, key)
    sign = "+" if key == "bias" and value > 0 else ""
    return f"{sign}{fmt(value, 3)}{' ' + unit if unit else ''}"


def _window(v: Version) -> str:
    if v.fit_start is None or v.fit_end is None:
        return "data from elsewhere"
    return _days((v.fit_start, v.fit_end))


def _days(window: tuple[date, date] | None) -> str:
    return "—" if window is None else f"{window[0]} .. {window[1]}"
