"""A status leads with what it means for plans, signed, in the model's units; the day's own
coverage is a reason only when it supports the finding (issue: "100 % of the 25 repairs fell
inside" was listed as a reason for a refit)."""

from __future__ import annotations

from datetime import date

import numpy as np

from monitor.config import Wording
from monitor.domain.status import Status
from monitor.monitoring.wording import Figures, plan_terms, reasons_for
from monitor.stats.coverage import CoverageTest
from monitor.stats.decision import Finding, Verdict
from monitor.stats.spread import SpreadTest

DAY = date(2026, 4, 14)
WORDS = Wording(row="load", rows="loads", y_unit="min", x_units={"pallets": "pallet"})


def _figures(**changes: object) -> Figures:
    values: dict[str, object] = dict(
        day=DAY, level=0.95, n=25, covered=25, window_days=14, window=None,
        cusum_shift=4.6, cusum_onset=date(2026, 4, 3), h=5.8, cusum_value=7.0,
        change_day=date(2026, 4, 3), old_slopes=np.array([2.09]), new_slopes=np.array([2.38]),
        predictors=("pallets",), slope=None, spread=None, since=DAY, held_since=None,
        typical_x=np.array([21.7]))
    values.update(changes)
    return Figures(**values)  # type: ignore[arg-type]


REFIT = Verdict(Status.REFIT, (Finding("bias", Status.REFIT, "upper"),
                               Finding("slope", Status.REFIT, "changed")), held=False)


def test_a_refit_leads_with_what_it_means_for_plans() -> None:
    reasons = reasons_for(REFIT, _figures(), WORDS, "load_minutes")
    assert reasons[0] == ("In plan terms: a typical load (pallets ≈ 22) now runs about 4.6 min "
                          "above plan; each pallet adds about 0.29 min more than planned")
    # the statistics follow; 25 of 25 inside today does not support a refit: not a reason
    assert any(r.startswith("Loads have run 4.6 min above plan") for r in reasons[1:])
    assert not any("fell inside" in r for r in reasons)


def test_below_plan_and_a_flatter_slope_are_signed() -> None:
    text = plan_terms(REFIT, _figures(cusum_shift=-3.3, new_slopes=np.array([1.8])), WORDS,
                      "load_minutes")
    assert text == ("In plan terms: a typical load (pallets ≈ 22) now runs about 3.3 min below "
                    "plan; each pallet adds about 0.29 min less than planned")


def test_several_predictors_and_no_units() -> None:
    words = Wording()
    figures = _figures(predictors=("job_units", "travel_km"), old_slopes=np.array([1.5, 0.2]),
                       new_slopes=np.array([1.5, 0.25]), typical_x=np.array([6.2, 44.6]))
    text = plan_terms(REFIT, figures, words, "repair_hours")
    assert text is not None
    assert "(job_units ≈ 6.2, travel_km ≈ 45) now runs about 4.6 (repair_hours) above plan" in text
    assert text.endswith("each unit of travel_km adds about 0.050 (repair_hours) more than "
                         "planned")
    assert "job_units adds" not in text  # unchanged slopes are not news


def test_coverage_and_spread_in_plan_terms_and_supporting_coverage_stays() -> None:
    watch = Verdict(Status.WATCH, (Finding("coverage", Status.WATCH, "low"),), held=False)
    window = CoverageTest(n=160, covered=118, target=0.95, dispersion=1.0, wilson_low=0.67,
                          wilson_high=0.80, pvalue_low=1e-6, pvalue_high=1.0)
    reasons = reasons_for(watch, _figures(n=25, covered=19, window=window), WORDS,
                          "load_minutes")
    # 118 of 160 inside: 26 % outside where a 95 % interval allows for 5 %
    assert reasons[0] == ("In plan terms: 26 % of loads now fall outside their planned range, "
                          "where the plans allow for 5 %")
    assert reasons[-1] == "76 % of the 25 loads on 2026-04-14 fell inside the 95 % interval"
    spread = Verdict(Status.WATCH, (Finding("spread", Status.WATCH, "wider"),), held=False)
    wider = SpreadTest(ratio=1.4, statistic=1.96, df_num=100, df_den=500, pvalue=1e-4,
                       pvalue_narrower=1.0, method="within-day")
    text = plan_terms(spread, _figures(spread=wider), WORDS, "load_minutes")
    assert text == ("In plan terms: loads scatter 40 % more around plan than when it was "
                    "fitted, so the planned ranges are too narrow")
    assert plan_terms(watch, _figures(), WORDS, "load_minutes") is None  # no window: nothing
