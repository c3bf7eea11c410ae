"""A feed that went quiet: how plausible a run of days without rows is, by the fit window's
calendar.

Each weekday ``w`` of the fit window had rows on ``D_w`` of its ``N_w`` days, so ``s_w = N_w -
D_w`` of them were silent. The days are taken as independent, each weekday silent with its own
unknown chance ``q_w``, given Jeffreys' prior Beta(1/2, 1/2); its posterior is then
Beta(s_w + 1/2, D_w + 1/2). The chance that the next ``k`` days of that weekday are all silent is
the posterior mean of ``q_w^k`` (a beta-binomial probability of ``k`` out of ``k``):

    E[q_w^k] = B(s_w + 1/2 + k, D_w + 1/2) / B(s_w + 1/2, D_w + 1/2)
             = prod_{i < k} (s_w + 1/2 + i) / (N_w + 1 + i)

and, the weekdays' chances being independent a priori, the chance of a whole run is the product
over weekdays. Uncertainty about the rates is thus part of the chance: a weekday with rows on
all of 9 fit-window days has a 5 % chance of a silent day, not 0, and two such days in a row
still have 0.25 %. A weekday without rows in the fit window (a closed Sunday) has a chance near
1 and adds next to nothing, and a run is only ever *flagged* on a day whose weekday had rows in
the fit window, so a closed day never tips it. Nor is it flagged before it holds
:data:`MIN_EXPECTED_DAYS` such days, however long the fit window: a night's file that arrives a
night late is routine (common practice, no source).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import date, timedelta

PRIOR = 0.5  # Jeffreys' Beta(1/2, 1/2) for each weekday's chance of a silent day
WEEK = 7
MIN_EXPECTED_DAYS = 2  # a run is flagged only once it holds this many days the calendar expects


@dataclass(frozen=True)
class WeekdayCalendar:
    """How many days of each weekday (Monday first) a window had, and how many had rows."""

    days: tuple[int, ...]
    with_rows: tuple[int, ...]

    def __post_init__(self) -> None:
        if len(self.days) != WEEK or len(self.with_rows) != WEEK:
            raise ValueError("a weekday calendar has seven counts, Monday first")
        if any(not 0 <= d <= n for d, n in zip(self.with_rows, self.days, strict=True)):
            raise ValueError("days with rows must lie between 0 and the days of the weekday")

    @classmethod
    def of(cls, first: date, last: date, days_with_rows: Iterable[date]) -> WeekdayCalendar:
        """The calendar of the window ``first..last``; days with rows outside it are ignored."""
        if last < first:
            raise ValueError(f"the window ends ({last}) before it starts ({first})")
        days = [0] * WEEK
        for offset in range((last - first).days + 1):
            days[(first + timedelta(days=offset)).weekday()] += 1
        with_rows = [0] * WEEK
        for day in set(days_with_rows):
            if first <= day <= last:
                with_rows[day.weekday()] += 1
        return cls(tuple(days), tuple(with_rows))

    def share(self, weekday: int) -> float:
        """The share of this weekday's days that had rows (0 when the window had none)."""
        n = self.days[weekday]
        return self.with_rows[weekday] / n if n else 0.0

    def expects_rows(self, weekday: int) -> bool:
        return self.with_rows[weekday] > 0


@dataclass(frozen=True)
class SilentRun:
    """A run of consecutive days without rows, judged against a calendar."""

    first_day: date
    last_day: date
    days: int
    expected_days: float  # days with rows the calendar's shares lead one to expect in the run
    chance: float  # chance of a run this quiet under the calendar (posterior predictive)
    level: float
    flagged_on: date | None  # the first day the chance fell below ``level`` (None: not yet)

    @property
    def flagged(self) -> bool:
        return self.flagged_on is not None


def silent_run(calendar: WeekdayCalendar, first: date, last: date, level: float) -> SilentRun:
    """Judge the days ``first..last``, none of which had rows, against ``calendar``.

    The run is flagged on its first day that the calendar expects rows on, that makes at least
    :data:`MIN_EXPECTED_DAYS` such days, and that brings the chance of the run so far below
    ``level``; the chance only falls as the run goes on.
    """
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level}")
    if last < first:
        raise ValueError(f"the run ends ({last}) before it starts ({first})")
    silent_so_far = [0] * WEEK
    chance, expected, expected_days = 1.0, 0.0, 0
    flagged_on = None
    days = (last - first).days + 1
    for offset in range(days):
        day = first + timedelta(days=offset)
        w = day.weekday()
        silent = calendar.days[w] - calendar.with_rows[w]
        chance *= (silent + PRIOR + silent_so_far[w]) / (calendar.days[w] + 2 * PRIOR
                                                         + silent_so_far[w])
        silent_so_far[w] += 1
        expected += calendar.share(w)
        if not calendar.expects_rows(w):
            continue
        expected_days += 1
        if flagged_on is None and chance < level and expected_days >= MIN_EXPECTED_DAYS:
            flagged_on = day
    return SilentRun(first, last, days, expected, chance, level, flagged_on)
