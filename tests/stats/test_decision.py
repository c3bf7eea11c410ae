"""The default decision policy, rule by rule (README, "What the figures mean": Status)."""

from __future__ import annotations

import math

import pytest

from monitor.stats.decision import Evidence, Policy, decide

NAN = math.nan


def evidence(**changes):
    base = dict(coverage_pvalue_low=0.4, coverage_pvalue_high=0.6, cusum_upper=0.0,
                cusum_lower=0.0, cusum_h=6.0, slope_pvalue=0.5, spread_pvalue=0.5)
    base.update(changes)
    return Evidence(**base)


@pytest.mark.parametrize("changes,status,signal", [
    ({}, "ok", None),
    ({"cusum_upper": 6.01}, "refit", "bias"),
    ({"cusum_lower": 9.0}, "refit", "bias"),
    ({"cusum_upper": 3.01}, "watch", "bias"),
    ({"cusum_upper": 3.0}, "ok", None),  # exactly h/2 is not above h/2
    ({"slope_pvalue": 0.0009}, "refit", "slope"),
    ({"slope_pvalue": 0.001}, "watch", "slope"),
    ({"slope_pvalue": 0.0099}, "watch", "slope"),
    ({"coverage_pvalue_low": 1e-6}, "refit", "coverage"),
    ({"coverage_pvalue_low": 0.005}, "watch", "coverage"),
    ({"coverage_pvalue_high": 1e-9}, "ok", None),  # too wide is reported, never a status
    ({"spread_pvalue": 1e-9}, "watch", "spread"),
    ({"slope_pvalue": NAN, "coverage_pvalue_low": NAN, "spread_pvalue": NAN}, "ok", None),
])
def test_default_policy(changes, status, signal):
    verdict = decide(evidence(**changes))
    assert verdict.status == status
    if signal:
        assert verdict.findings[0].signal == signal
    else:
        assert verdict.findings == ()


def test_strongest_findings_come_first():
    verdict = decide(evidence(spread_pvalue=0.001, cusum_upper=7.0, coverage_pvalue_low=0.005))
    assert [f.level for f in verdict.findings] == ["refit", "watch", "watch"]
    assert verdict.findings[0].signal == "bias" and verdict.findings[0].kind == "upper"


def test_a_refit_holds_until_released():
    verdict = decide(evidence(), refit_held=True)
    assert verdict.status == "refit" and verdict.held and verdict.findings == ()


def test_policy_is_configurable_and_validated():
    assert decide(evidence(slope_pvalue=0.004), Policy(refit_pvalue=0.005)).status == "refit"
    with pytest.raises(ValueError):
        Policy(refit_pvalue=0.02, watch_pvalue=0.01)
