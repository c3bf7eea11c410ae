"""The states of a stored version: the one definition, light enough for the quick commands."""

from __future__ import annotations

from enum import StrEnum


class VersionState(StrEnum):
    ACTIVE = "active"  # scores the model's days now
    CANDIDATE = "candidate"  # fitted by refit (or a later fit), not promoted
    RETIRED = "retired"  # scored an earlier run of days
