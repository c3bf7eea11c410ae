"""A feed that went quiet: the chance of a silent run under the fit window's calendar."""

from __future__ import annotations

from datetime import date, timedelta
from itertools import pairwise

import pytest
from scipy import stats

from monitor.stats.silence import WeekdayCalendar, silent_run

LEVEL = 0.001
MONDAY = date(2026, 1, 5)


def _calendar(weeks: int, weekdays: set[int], *, missing: tuple[date, ...] = ()
              ) -> tuple[WeekdayCalendar, date]:
    """A fit window of ``weeks`` whole weeks from a Monday with rows on ``weekdays``."""
    last = MONDAY + timedelta(days=7 * weeks - 1)
    days = [MONDAY + timedelta(days=i) for i in range(7 * weeks)]
    rows = [d for d in days if d.weekday() in weekdays and d not in missing]
    return WeekdayCalendar.of(MONDAY, last, rows), last


def _working_days_until_flagged(calendar: WeekdayCalendar, first: date,
                                weekdays: set[int]) -> int | None:
    run = silent_run(calendar, first, first + timedelta(days=60), LEVEL)
    if run.flagged_on is None:
        return None
    span = (run.flagged_on - first).days + 1
    return sum((first + timedelta(days=i)).weekday() in weekdays for i in range(span))


def test_calendar_counts_each_weekday_and_its_days_with_rows() -> None:
    calendar, last = _calendar(9, {0, 1, 2, 3, 4, 5}, missing=(date(2026, 2, 16),))
    assert last == date(2026, 3, 8)
    assert calendar.days == (9,) * 7
    assert calendar.with_rows == (8, 9, 9, 9, 9, 9, 0)  # a Monday without rows; Sundays none
    assert calendar.share(0) == pytest.approx(8 / 9) and calendar.share(6) == 0.0
    assert not calendar.expects_rows(6)


# The chance of a run is, per weekday, the beta-binomial probability of k silent days out of
# k under the weekday's Jeffreys posterior Beta(silent + 1/2, with rows + 1/2); scipy.stats'
# betabinom is the reference implementation of that distribution.
def test_chance_is_the_product_of_beta_binomial_probabilities_per_weekday() -> None:
    calendar, last = _calendar(9, {0, 1, 2, 3, 4, 5}, missing=(date(2026, 2, 16),
                                                               date(2026, 2, 21)))
    first = last + timedelta(days=1)  # a Monday; 16 silent days: 3 Mondays, 2 of the rest
    run = silent_run(calendar, first, first + timedelta(days=15), LEVEL)
    expected = 1.0
    for w in range(7):
        k = sum((first + timedelta(days=i)).weekday() == w for i in range(16))
        silent = calendar.days[w] - calendar.with_rows[w]
        expected *= stats.betabinom.pmf(k, k, silent + 0.5, calendar.with_rows[w] + 0.5)
    assert run.days == 16
    assert run.chance == pytest.approx(expected, rel=1e-12)
    assert run.expected_days == pytest.approx(sum(
        calendar.share((first + timedelta(days=i)).weekday()) for i in range(16)))


def test_a_closed_sunday_is_never_flagged_and_barely_counts() -> None:
    calendar, last = _calendar(9, {0, 1, 2, 3, 4, 5})
    sunday = last + timedelta(days=7)
    alone = silent_run(calendar, sunday, sunday, LEVEL)
    assert not alone.flagged and alone.chance == pytest.approx(9.5 / 10)
    assert alone.expected_days == 0.0
    for start in range(14):  # whatever day the feed stops, a Sunday never raises the flag
        first = last + timedelta(days=1 + start)
        run = silent_run(calendar, first, first + timedelta(days=40), LEVEL)
        assert run.flagged_on is not None and run.flagged_on.weekday() != 6


@pytest.mark.parametrize("weeks, working_days", [(4, {3, 4}), (9, {3}), (13, {3}), (26, {2}),
                                                  (52, {2})])
@pytest.mark.parametrize("weekdays", [{0, 1, 2, 3, 4}, {0, 1, 2, 3, 4, 5}, set(range(7))],
                         ids=["5-day week", "6-day week", "7-day week"])
def test_how_many_silent_working_days_raise_the_flag(weeks: int, working_days: set[int],
                                                     weekdays: set[int]) -> None:
    # The Jeffreys chance of one silent day of a weekday that always had rows is
    # 1/2 / (weeks + 1): 0.05 after 9 weeks, so two such days (0.0025) are still plausible at
    # the 0.001 level and three (0.000125) are not; after 26 weeks (0.0185) two are enough.
    # After 4 weeks (0.1 a day) three days reach 0.001 exactly, and a weekend in between
    # (0.9 a day) tips it below.
    calendar, last = _calendar(weeks, weekdays)
    for start in range(7):
        first = last + timedelta(days=1 + start)
        assert _working_days_until_flagged(calendar, first, weekdays) in working_days


def test_one_silent_working_day_is_never_enough() -> None:
    calendar, last = _calendar(520, {0, 1, 2, 3, 4})  # ten years of rows every working day
    first = last + timedelta(days=1)
    one = silent_run(calendar, first, first, LEVEL)
    assert one.chance < LEVEL and not one.flagged  # a file a night late is routine
    assert silent_run(calendar, first, first + timedelta(days=1), LEVEL).flagged


def test_irregular_days_and_holidays_make_a_pause_more_plausible() -> None:
    regular, last = _calendar(9, {0, 1, 2, 3, 4})
    holidays = (date(2026, 1, 6), date(2026, 1, 27), date(2026, 2, 3),
                date(2026, 3, 3))  # four Tuesdays without rows: 4.5 / 10 for a silent one
    with_holidays, _ = _calendar(9, {0, 1, 2, 3, 4}, missing=holidays)
    first = last + timedelta(days=1)
    tight = silent_run(regular, first, first + timedelta(days=2), LEVEL)
    loose = silent_run(with_holidays, first, first + timedelta(days=2), LEVEL)
    assert tight.flagged and not loose.flagged and loose.chance > tight.chance
    # Saturdays with rows on about half of them: a silent one halves the chance, no more
    half, _ = _calendar(8, {0, 1, 2, 3, 4})
    half = WeekdayCalendar(half.days, (*half.with_rows[:5], 4, 0))
    saturday = first + timedelta(days=5)
    assert silent_run(half, saturday, saturday, LEVEL).chance == pytest.approx(4.5 / 9)


def test_the_chance_only_falls_as_the_run_goes_on() -> None:
    calendar, last = _calendar(9, {0, 2, 4})
    first = last + timedelta(days=1)
    chances = [silent_run(calendar, first, first + timedelta(days=n), LEVEL).chance
               for n in range(20)]
    assert all(b <= a for a, b in pairwise(chances))


def test_bad_arguments_are_refused() -> None:
    calendar, last = _calendar(2, {0})
    with pytest.raises(ValueError, match="level"):
        silent_run(calendar, last, last, 1.0)
    with pytest.raises(ValueError, match="before it starts"):
        silent_run(calendar, last, last - timedelta(days=1), LEVEL)
    with pytest.raises(ValueError, match="seven"):
        WeekdayCalendar((1,) * 6, (0,) * 6)
