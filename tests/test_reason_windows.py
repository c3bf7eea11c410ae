"""The coverage window in the day's reasons after a restart: only the days it really holds.

A promotion, rollback or acknowledgement restarts the rolling coverage window (README, "What
the figures mean"); until it is full again, the reasons must not speak of "the last 14 days".
"""

from __future__ import annotations

from datetime import date

import numpy as np

from monitor.config import Wording
from monitor.domain.check import coverage_span
from monitor.domain.status import Status
from monitor.monitoring.wording import Figures, reasons_for
from monitor.stats.coverage import CoverageTest
from monitor.stats.decision import Finding, Verdict

DAY = date(2026, 4, 14)
WORDS = Wording(row="load", rows="loads", y_unit="min", x_units={"pallets": "pallet"})


def _low_coverage_reasons(**window: object) -> list[str]:
    test = CoverageTest(n=160, covered=118, target=0.95, dispersion=1.0, wilson_low=0.67,
                        wilson_high=0.80, pvalue_low=1e-6, pvalue_high=1.0)
    figures = Figures(day=DAY, level=0.95, n=80, covered=60, window_days=14, window=test,
                      cusum_shift=float("nan"), cusum_onset=None, h=5.8, cusum_value=0.0,
                      change_day=None, old_slopes=np.array([2.09]), new_slopes=None,
                      predictors=("pallets",), slope=None, spread=None, since=DAY,
                      held_since=None, **window)  # type: ignore[arg-type]
    verdict = Verdict(Status.REFIT, (Finding("coverage", Status.REFIT, "low"),), held=False)
    reasons = reasons_for(verdict, figures, WORDS, "load_minutes")
    assert reasons[0].startswith("In plan terms: 26 % of loads now fall outside")  # leads
    return reasons[1:]


def test_two_days_after_a_promotion_the_reason_counts_two_days() -> None:
    first, held = coverage_span(DAY, 14, date(2026, 4, 13))
    assert (first, held) == (date(2026, 4, 13), 2)
    reasons = _low_coverage_reasons(window_first=first, window_held=held, window_version=5)
    assert reasons[0].startswith("Intervals cover too rarely: on the 2 days under version 5 "
                                 "(from 2026-04-13) 74 % of 160 loads did")
    assert not any("last 14 days" in r for r in reasons)


def test_after_an_acknowledgement_the_reason_says_since_when() -> None:
    first, held = coverage_span(DAY, 14, date(2026, 4, 12))
    reasons = _low_coverage_reasons(window_first=first, window_held=held, window_version=None)
    assert "on the 3 days since the advice was acknowledged (2026-04-12) 74 %" in reasons[0]


def test_a_full_window_is_the_last_14_days() -> None:
    # a restart 14 or more days back no longer cuts the window short
    assert coverage_span(DAY, 14, date(2026, 4, 1)) == (date(2026, 4, 1), 14)
    assert coverage_span(DAY, 14, date(2026, 3, 1)) == (date(2026, 4, 1), 14)
    assert coverage_span(DAY, 14, None) == (date(2026, 4, 1), 14)
    first, held = coverage_span(DAY, 14, date(2026, 3, 1))
    reasons = _low_coverage_reasons(window_first=first, window_held=held, window_version=5)
    assert "over the last 14 days 74 % of 160 loads did" in reasons[0]
