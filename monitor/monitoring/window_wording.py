"""What a version's fit window showed, in plain words (``model show``, the model's page): one
finding per question the fit asks of its window
(:class:`~monitor.stats.window_summary.FitDiagnosis`), with what the monitor does about it. Kept
apart from the day's reasons (``wording``), which need the check's statistics; these need only
the stored summary.
"""

from __future__ import annotations

from dataclasses import dataclass

from monitor.config import Wording
from monitor.domain.phrasing import amount, fmt, fmt_p, percent
from monitor.stats.window_summary import RHYTHM_MIN_DAYS, FitDiagnosis

WINDOW_ALPHA = 0.01  # a fit-window finding is reported below this p-value
_WEEKDAYS = ("Mondays", "Tuesdays", "Wednesdays", "Thursdays", "Fridays", "Saturdays",
             "Sundays")


@dataclass(frozen=True)
class WindowFinding:
    """One question asked of the fit window, answered in plain words."""

    topic: str  # persistence | weekday | spread_with_x | tails
    found: bool
    text: str


def window_findings(d: FitDiagnosis, words: Wording, response: str,
                    predictors: tuple[str, ...]) -> list[WindowFinding]:
    """What the fit window shows beyond the textbook model, and what the monitor does about it."""
    out = []
    lb = d.persistence_test
    if d.chart_persistence() > 0:
        out.append(WindowFinding("persistence", True, (
            f"day shocks carry over to the next day (r = {fmt(d.persistence, 2)}): the bias "
            "chart and the coverage test allow for it, so a run of high days is not taken "
            "for a change as readily")))
    else:
        out.append(WindowFinding("persistence", False, (
            f"day shocks look independent from one day to the next (r = "
            f"{fmt(d.persistence, 2)}; all lags to {int(lb.df[0]) if lb.df else 0}: "
            f"{fmt_p(lb.pvalue)})")))
    wd = d.weekday_test
    if wd.significant(WINDOW_ALPHA):
        effects = [(abs(v), i, v) for i, v in enumerate(d.weekday_effects) if v is not None]
        parts = [f"{_WEEKDAYS[i]} run {amount(v, words, response)} "
                 f"{'above' if v > 0 else 'below'} plan"
                 for _, i, v in sorted(effects, reverse=True)[:2]]
        out.append(WindowFinding("weekday", True, (
            "; ".join(parts) + f" (weekday test {fmt_p(wd.pvalue)}): " + (
                "the bias chart measures each day against its weekday's usual level, so this "
                "rhythm is not taken for a change; planned times still miss it, so consider a "
                "weekday predictor" if d.rhythm(WINDOW_ALPHA) is not None else
                "the monitor counts this rhythm as day-to-day variation, which widens its "
                f"limits and slows detection (it measures days against their weekday only "
                f"when each working weekday has at least {RHYTHM_MIN_DAYS} fit days); "
                "consider a weekday predictor"))))
    else:
        out.append(WindowFinding("weekday", False,
                                 f"no weekday rhythm in the day residuals ({fmt_p(wd.pvalue)})"))
    sx = d.spread_x_test
    if sx.significant(WINDOW_ALPHA):
        names = " and ".join(predictors)
        out.append(WindowFinding("spread_with_x", True, (
            f"the scatter changes with {names} ({fmt_p(sx.pvalue)}): intervals are too narrow "
            "where it is large and too wide where it is small; the spread test compares days "
            "with the fit window's own days, so this is not taken for a change")))
    else:
        out.append(WindowFinding("spread_with_x", False,
                                 f"the scatter does not change with the predictors "
                                 f"({fmt_p(sx.pvalue)})"))
    if d.heavy_tails:
        out.append(WindowFinding("tails", True, (
            f"{percent(d.tail_share, 2)} of {words.rows} lie beyond 4 typical deviations "
            f"(normal scatter: 0.01 %); without them the within-day scatter is "
            f"{fmt(d.robust_sd, 3)} instead of {fmt(d.classical_sd, 3)}. Intervals are wider "
            "than needed for most rows: the monitor reports that without raising the status, "
            "and its spread test uses day medians")))
    else:
        out.append(WindowFinding("tails", False, (
            f"no excess of outlying {words.rows} (robust within-day scatter "
            f"{fmt(d.robust_sd, 3)}, classical {fmt(d.classical_sd, 3)})")))
    return out
