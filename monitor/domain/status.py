"""The three statuses of a model and their order: the one definition the whole program uses."""

from __future__ import annotations

from collections.abc import Iterable
from enum import StrEnum


class Status(StrEnum):
    """Where a model stands: ``ok`` < ``watch`` < ``refit``."""

    OK = "ok"
    WATCH = "watch"
    REFIT = "refit"

    @property
    def rank(self) -> int:
        return _RANK[self]

    def at_least(self, other: Status | str) -> bool:
        return self.rank >= Status(other).rank


_RANK = {Status.OK: 0, Status.WATCH: 1, Status.REFIT: 2}
ALERTING = (Status.REFIT, Status.WATCH)  # the statuses that can be news


def worst(statuses: Iterable[Status | str]) -> Status | None:
    """The highest-ranked status among ``statuses`` (None when there are none)."""
    found = [Status(s) for s in statuses]
    return max(found, key=lambda s: s.rank) if found else None
