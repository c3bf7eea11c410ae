"""A rising rejection share: recent rejections against the model's long-run share."""

from __future__ import annotations

import pytest
from scipy import stats

from monitor.stats.rejection_rise import MIN_PAST_ROWS, rejection_rise


# The exact one-sided binomial test; scipy.stats.binomtest is the reference implementation.
@pytest.mark.parametrize("recent, read, past, past_read", [
    (30, 500, 40, 20_000), (0, 500, 40, 20_000), (3, 500, 0, 5_000), (500, 500, 10, 1_000)])
def test_pvalue_is_scipys_exact_binomial_test(recent: int, read: int, past: int,
                                              past_read: int) -> None:
    rise = rejection_rise(recent, read, past, past_read, 0.001)
    assert rise is not None
    share = (past + 0.5) / (past_read + 1)
    reference = stats.binomtest(recent, read, share, alternative="greater").pvalue
    assert rise.pvalue == pytest.approx(reference, rel=1e-9, abs=1e-300)
    assert rise.past_share == pytest.approx(share)


def test_a_share_far_above_the_long_run_is_rising() -> None:
    rise = rejection_rise(60, 600, 30, 15_000, 0.001)  # 10 % now, 0.2 % before
    assert rise is not None and rise.rising and rise.recent_share == pytest.approx(0.1)


def test_a_share_like_the_long_run_is_not() -> None:
    rise = rejection_rise(2, 600, 60, 15_000, 0.001)  # 0.33 % now, 0.4 % before
    assert rise is not None and not rise.rising and rise.pvalue > 0.5


def test_a_few_bad_rows_after_a_clean_history_are_significant_but_too_few_to_count() -> None:
    # 3 of 500 after 0 of 5000: p < 0.001 for rows taken one by one, but 0.6 % of the rows
    # is below the 1 % floor (rows of one file share their fate, so size matters too)
    rise = rejection_rise(3, 500, 0, 5_000, 0.001)
    assert rise is not None and rise.pvalue < 0.001 and not rise.rising
    assert rejection_rise(10, 500, 0, 5_000, 0.001).rising


def test_no_judgement_without_rows_on_either_side() -> None:
    assert rejection_rise(0, 0, 5, 5_000, 0.001) is None
    assert rejection_rise(5, 50, 0, MIN_PAST_ROWS - 1, 0.001) is None
    with pytest.raises(ValueError):
        rejection_rise(6, 5, 0, 1_000, 0.001)
