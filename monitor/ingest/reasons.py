"""Why a row was not stored: reason codes, their phrases, and the rejected-row record."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

RAW_LIMIT = 2000  # characters of a rejected row's text that are kept
DETAIL_VALUE_LIMIT = 60  # characters of an offending value quoted in a detail

# code -> phrase for sentences ("3 not a number"); the order is the order of the checks.
REASONS: dict[str, str] = {
    "wrong_field_count": "wrong number of fields",
    "bad_quoting": "broken quoting",
    "row_too_long": "row too long",
    "empty_field": "empty field",
    "not_a_number": "not a number",
    "not_finite": "NaN or infinite",
    "too_large": "too large to compute with",
    "bad_time": "unreadable time",
    "dst_gap": "local time skipped by a clock change",
    "dst_ambiguous": "ambiguous local time at a clock change",
    "future_time": "time in the future",
    "too_early": "time before the plausible window",
    "before_retention": "on a day whose rows were pruned",
    "bad_id": "unusable id",
    "out_of_range": "outside the plausible range",
    "conflict": "conflicts with a stored row",
    "file_rejected": "rejected with the whole file (--strict)",
}


def ranked(counts: Mapping[str, int]) -> list[tuple[str, int]]:
    """Reason codes and counts, the commonest first (ties in the order of the checks); rows
    rejected only along with a --strict file are left out."""
    order = list(REASONS)
    found = [(code, n) for code, n in counts.items() if code != "file_rejected" and n]
    return sorted(found, key=lambda item: (-item[1], order.index(item[0])
                                           if item[0] in order else len(order)))


@dataclass(frozen=True)
class Rejection:
    """One input row that was not stored: where it was, what it said, and why."""

    line: int
    raw: str
    reason: str
    detail: str

    def __post_init__(self) -> None:
        if self.reason not in REASONS:
            raise ValueError(f"unknown reason code {self.reason!r}")
        if len(self.raw) > RAW_LIMIT:
            cut = f"… [{len(self.raw):,} characters in all]"
            object.__setattr__(self, "raw", self.raw[:RAW_LIMIT] + cut)


def quote_value(value: object) -> str:
    """An offending value for a detail text, shortened and quoted."""
    text = str(value)
    if len(text) > DETAIL_VALUE_LIMIT:
        text = text[:DETAIL_VALUE_LIMIT] + f"… ({len(text):,} characters)"
    return repr(text)
