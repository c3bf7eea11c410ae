"""The states of a stored version: the one definition, light enough for the quick commands."""

from __future__ import annotations

from datetime import date
from enum import StrEnum
from typing import Protocol


class VersionState(StrEnum):
    ACTIVE = "active"  # scores the model's days now
    CANDIDATE = "candidate"  # fitted by refit (or a later fit), not promoted
    RETIRED = "retired"  # scored an earlier run of days


class DatedVersion(Protocol):
    """A version as far as its days go (a whole version or the head a status line reads)."""

    @property
    def number(self) -> int: ...

    @property
    def fit_start(self) -> date | None: ...

    @property
    def fit_end(self) -> date | None: ...

    @property
    def active_from(self) -> date | None: ...
