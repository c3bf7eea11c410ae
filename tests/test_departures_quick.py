"""Seeded, fast versions of the departures benchmark (``tests/benchmarks/sim_departures.py``).

Each simulated model is fitted on 60 days and walked with the production day loop
(``replay_arrays``: ``fit_window`` -> version -> ``walk``), every refit acknowledged the next
day. The bounds come from the nightly policy's target of at most one false ``refit`` episode
per 1000 model-days in control (the target ``sim_promise.py`` measures; issue 8): if episodes
were Poisson at that rate, the bound is exceeded with probability at most 2.5 %, so a failure
is evidence against the target, not bad luck. The models are the first few of the benchmark's
numbering (0, 1, 2, ...), fixed in advance.
"""

from __future__ import annotations

import pytest
from scipy.stats import poisson
from statsmodels.stats.rates import confint_poisson

from monitor.config import Settings
from monitor.domain.status import Status
from monitor.monitoring.replay import replay_arrays
from tests.benchmarks.departures import CASES, Change, simulate
from tests.benchmarks.sim_departures import NOW, Job, garwood, run_job, spec_for

DAYS = 200


def _false_episodes(case: str, models: int) -> int:
    return sum(len(run_job(Job(case, m, DAYS, (), 0)).refit_starts) for m in range(models))


def _bound(model_days: int, promise_per_1000: float = 1.0, size: float = 0.025) -> int:
    """The largest count that a Poisson rate at the promise exceeds with probability <= size."""
    mean = promise_per_1000 * model_days / 1000
    return int(poisson.ppf(1 - size, mean))


@pytest.mark.slow
def test_textbook_data_keep_the_target_over_200_days() -> None:
    # 3 models x 200 days = 600 model-days; P(N > 2 | Poisson(0.6)) = 2.3 % (scipy.stats.poisson)
    bound = _bound(3 * DAYS)
    assert bound == 2
    assert _false_episodes("textbook", 3) <= bound


@pytest.mark.slow
def test_persistent_day_shocks_keep_the_target_over_200_days() -> None:
    # AR(1) day shocks, phi 0.5, the same marginal variance as the textbook case. 6 models x
    # 200 days = 1200 model-days; P(N > 4 | Poisson(1.2)) = 0.8 %. At the rate issue 8 reports
    # for the calibration of the time (7.7 per 1000 model-days) about 9 would be expected.
    assert CASES["ar1_0.5"].phi == 0.5
    bound = _bound(6 * DAYS)
    assert bound == 4
    assert _false_episodes("ar1_0.5", 6) <= bound


def test_a_change_walk_resumes_as_the_nights_do() -> None:
    # The benchmark walks a change variant from the change day on, resuming from the in-control
    # checks before it (as the nightly check resumes from stored ones). With a change of zero
    # the resumed days must be the in-control walk's days, whatever day the walk resumes on.
    calm = run_job(Job("ar1_0.5", 6, 60, (), 0))
    starts = (10, 35)
    changes = tuple(Change(f"none_{a}", step=0.0, after=a) for a in starts)
    resumed = run_job(Job("ar1_0.5", 6, 60, changes, 20))
    assert resumed.statuses == calm.statuses
    for start, change in zip(starts, changes, strict=True):
        part = resumed.changes[change.name]
        assert len(part.statuses) == min(20, 60 - start)
        assert part.statuses == calm.statuses[start:start + len(part.statuses)]


@pytest.mark.parametrize("count, exposure", [(0, 1.0), (2, 0.24), (10, 1.0), (77, 10.0)])
def test_garwood_interval_matches_statsmodels(count: int, exposure: float) -> None:
    # statsmodels' exact central Poisson interval ('exact-c', Garwood 1936) as the reference
    low, high = garwood(count, exposure)
    ref_low, ref_high = confint_poisson(count, exposure, method="exact-c")
    assert low == pytest.approx(ref_low, rel=1e-9, abs=1e-12)
    assert high == pytest.approx(ref_high, rel=1e-9)


@pytest.mark.slow
@pytest.mark.parametrize("case", ["textbook", "ar1_0.5", "weekly"])
def test_a_ten_percent_slope_step_is_flagged_within_a_week(case: str) -> None:
    # Issue 9's target is a median of at most 3 days on textbook data and 5 under departures;
    # every one of the first three models must be flagged within 7 days (the within-day slope
    # chart sees the change on each day's own rows, whatever the day shocks or the weekday).
    change = Change("step_10", step=0.10, after=20)
    for model in range(3):
        caught = run_job(Job(case, model, 20, (change,), 14)).changes["step_10"]
        assert caught.delay is not None and caught.delay <= 7, (model, caught)


@pytest.mark.slow
def test_the_change_day_of_a_standing_refit_never_walks_back() -> None:
    # A refit is left standing (not acknowledged) for 40 days after a +10 % slope step: the
    # change day it names is the estimate made when it was advised, refined only forward, and
    # it lies within a week of the true change day (common practice, no source: a change-date
    # estimate that walks back mixes the old regime into the refit).
    case = CASES["ar1_0.5"]
    change = Change("step_10", step=0.10, after=20)
    world = simulate(case, 0, 60).with_change(change)
    _, _, checks = replay_arrays(spec_for(case), Settings().for_model("dock"), world.days,
                                 world.x, world.y, world.fit_end, acknowledge_refits=False,
                                 now=NOW)
    named = [c.change_day for c in checks if c.status == Status.REFIT]
    assert len(named) >= 30 and all(d is not None for d in named)
    assert named == sorted(named)
    assert abs((named[0] - change.day).days) <= 7
