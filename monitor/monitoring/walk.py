"""Walking a model's days in order: which version scores each day, what each day reads.

Shared by the nightly check (:mod:`monitor.monitoring.check`, which loads a block of days from
the database) and by replay (:mod:`monitor.monitoring.replay`, which reads a history file into
memory): one copy of the day loop, so a replay behaves exactly as the nights would have.
"""

from __future__ import annotations

from bisect import bisect_left, bisect_right
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import date, datetime, timedelta

import numpy as np
from numpy.typing import NDArray

from monitor.config import ModelSettings
from monitor.domain.check import Carry, DayCheck
from monitor.domain.days import as_date
from monitor.domain.status import Status
from monitor.domain.version import Version
from monitor.monitoring.evaluate import DayInput, VersionContext, evaluate_day
from monitor.stats.moments import DayMoments

HISTORY_DAYS = 365  # how far back a change day is looked for


@dataclass(frozen=True, eq=False)
class Timeline:
    """Rows (sorted by day) and per-day statistics (days with rows, in order) to walk over."""

    row_days: NDArray[np.datetime64]
    x: NDArray[np.float64]
    y: NDArray[np.float64]
    stats: DayMoments
    revisions: Mapping[date, int]
    stat_days: list[date] = field(init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "row_days", np.asarray(self.row_days, dtype="datetime64[D]"))
        object.__setattr__(self, "stat_days", [as_date(d) for d in self.stats.days])

    @classmethod
    def from_rows(cls, days: NDArray[np.datetime64], x: NDArray[np.float64],
                  y: NDArray[np.float64]) -> Timeline:
        """A timeline of rows held in memory (the day statistics computed from them)."""
        order = np.argsort(np.asarray(days, dtype="datetime64[D]"), kind="stable")
        d, xs, ys = np.asarray(days, dtype="datetime64[D]")[order], x[order], y[order]
        stats = DayMoments.from_rows(d, np.column_stack([xs, ys]))
        return cls(d, xs, ys, stats, {as_date(day): 1 for day in stats.days})

    def day_input(self, day: date, ctx: VersionContext, test_window_days: int,
                  fresh_from: date | None = None) -> DayInput:
        """What evaluating ``day`` reads; test windows start no earlier than ``fresh_from``."""
        key = np.datetime64(day, "D")
        lo = int(np.searchsorted(self.row_days, key, side="left"))
        hi = int(np.searchsorted(self.row_days, key, side="right"))
        upto = bisect_right(self.stat_days, day)
        window_lo = max(day - timedelta(days=test_window_days - 1), ctx.first_recent_day,
                        fresh_from or ctx.first_recent_day)
        history_lo = max(day - timedelta(days=HISTORY_DAYS), ctx.first_recent_day)
        return DayInput(
            day, self.x[lo:hi], self.y[lo:hi], self.revisions.get(day, 0),
            self.stats.select(slice(bisect_left(self.stat_days, window_lo), upto)),
            self.stats.select(slice(bisect_left(self.stat_days, history_lo), upto)))


@dataclass(frozen=True)
class Subject:
    """The model being walked: its identity, response column and settings."""

    model_id: int
    name: str
    response: str
    settings: ModelSettings


def version_on(versions: Sequence[Version], day: date) -> Version | None:
    """The version scoring ``day`` (the last to take over before or on it)."""
    found = None
    for v in versions:
        if v.scores_day(day):
            found = v
    return found


def walk(subject: Subject, versions: Sequence[Version], timeline: Timeline, first: date,
         last: date, carry: Carry, *, now: datetime, resets: frozenset[date] = frozenset(),
         acknowledge_refits: bool = False,
         contexts: dict[int, VersionContext] | None = None) -> tuple[list[DayCheck], Carry]:
    """Evaluate every day from ``first`` to ``last`` that some version scores.

    The CUSUM restarts (and a held refit is released) on the day a version takes over and on
    each day in ``resets`` (acknowledgements). ``acknowledge_refits`` acknowledges every refit
    on the following day, as a planner who judged it a false alarm would (replay uses it to
    count how often a policy fires).
    """
    cs = subject.settings.check
    contexts = {} if contexts is None else contexts
    out: list[DayCheck] = []
    previous: int | None = None
    day = first
    while day <= last:
        version = version_on(versions, day)
        if version is not None:
            if version.id not in contexts:
                contexts[version.id] = VersionContext.build(version, cs)
            ctx = contexts[version.id]
            took_over = (previous is not None and previous != version.id) \
                or version.active_from == day
            if took_over or day in resets or (acknowledge_refits and carry.status == Status.REFIT):
                carry = carry.restarted(day, same_version=not took_over)
            previous = version.id
            data = timeline.day_input(day, ctx, cs.test_window_days, carry.fresh_from)
            check, carry = evaluate_day(ctx, carry, data, cs, subject.settings.words,
                                        subject.response, now, subject.model_id, subject.name)
            out.append(check)
        day += timedelta(days=1)
    return out, carry
