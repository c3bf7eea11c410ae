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

from tests.benchmarks.departures import CASES, Change
from tests.benchmarks.sim_departures import Job, garwood, run_job

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
