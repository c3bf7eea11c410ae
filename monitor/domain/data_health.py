"""Data health: what the monitor knows about its data, apart from the model's status.

The status (ok, watch, refit) judges the rows that arrived. Data health says whether rows arrive
and are usable: a feed silent for longer than the fit window's calendar makes plausible, a file
(or SQL source run) rejected whole or mostly, a share of rejected rows rising above the model's
long run. ``monitor.monitoring.data_health`` finds them; ``status``, the nightly digest and
``check --fail-on watch`` show them. While a feed is silent, "ok" only describes the days
before: the wording says the monitor has no data, never that the model is fine.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from datetime import date, datetime
from pathlib import PurePath
from typing import Any

from monitor.domain.phrasing import fmt_p, percent


def mostly_rejected(bad: int, read: int, share: float) -> bool:
    """Whether more than ``share`` of a file's ``read`` rows were bad."""
    return read > 0 and bad / read > share


@dataclass(frozen=True)
class ReasonCount:
    code: str
    phrase: str  # as in monitor.ingest.reasons.REASONS ("not a number")
    count: int


@dataclass(frozen=True)
class RejectedExample:
    """One rejected row: where it was, what it said and why."""

    line: int
    raw: str
    detail: str

    def phrase(self) -> str:
        raw = self.raw if len(self.raw) <= 120 else self.raw[:120] + "…"
        return f"e.g. line {self.line}: {self.detail} (the line reads \"{raw}\")"


def _why(reasons: tuple[ReasonCount, ...], example: RejectedExample | None) -> str:
    """' — 56 not a number; e.g. line 2: ...' (empty without reasons or example)."""
    text = " — " + "; ".join(f"{r.count:,} {r.phrase}" for r in reasons) if reasons else ""
    return text + (f"; {example.phrase()}" if example is not None else "")


def _why_dict(reasons: tuple[ReasonCount, ...], example: RejectedExample | None
              ) -> dict[str, Any]:
    return {"reasons": {r.code: r.count for r in reasons},
            "example": asdict(example) if example is not None else None}


@dataclass(frozen=True)
class BadFile:
    """A file (or SQL source run) rejected whole or mostly, ingested recently."""

    batch_id: int
    source: str
    ingested_at: datetime  # aware, in the configured zone
    read: int
    bad: int  # rows rejected for a reason of their own (not along with a --strict file)
    whole: bool  # nothing of it was stored
    reasons: tuple[ReasonCount, ...]  # the commonest first
    example: RejectedExample | None

    @property
    def name(self) -> str:
        return "an SQL source run" if self.source.startswith("sql:") else self.source

    def short(self) -> str:
        name = self.name if self.source.startswith("sql:") else PurePath(self.source).name
        return f"{name} rejected {'whole' if self.whole else 'mostly'}"

    def sentence(self) -> str:
        when = f"ingested {self.ingested_at:%Y-%m-%d %H:%M}"
        if self.whole and self.bad == self.read:
            what = ("was rejected whole: its row is bad" if self.read == 1
                    else f"was rejected whole: all {self.read:,} rows are bad")
        elif self.whole:
            what = (f"was rejected whole (--strict): {self.bad:,} of its {self.read:,} rows "
                    f"{'is' if self.bad == 1 else 'are'} bad")
        else:
            what = (f"lost most of its rows: {self.bad:,} of {self.read:,} rejected "
                    f"({percent(self.bad / self.read)})")
        return f"{self.name} ({when}) {what}{_why(self.reasons, self.example)}"

    def as_dict(self) -> dict[str, Any]:
        return {"batch_id": self.batch_id, "source": self.source,
                "ingested_at": self.ingested_at, "read": self.read, "bad": self.bad,
                "whole": self.whole, **_why_dict(self.reasons, self.example),
                "sentence": self.sentence()}


@dataclass(frozen=True)
class SilentFeed:
    """No rows for longer than the fit window's calendar makes plausible."""

    last_rows_day: date | None  # None: no rows ever
    first_day: date  # the first day of the run without rows
    through: date  # the last day judged (the last checked day, or the night)
    days: int
    expected_days: float  # days with rows the calendar's shares lead one to expect in the run
    chance: float  # of a run this quiet, by the calendar
    level: float  # check.silence_pvalue
    flagged_on: date  # the day the run became implausible
    calendar: str  # which days the calendar comes from, for the sentence

    def short(self) -> str:
        since = f"since {self.last_rows_day}" if self.last_rows_day else "at all"
        return f"no rows {since}"

    def sentence(self) -> str:
        chance = "below 0.001" if self.chance < 0.001 else f"of {self.chance:.3f}"
        days = "1 day" if self.days == 1 else f"{self.days} days"
        return (f"{self.short()} ({days} through {self.through}; by {self.calendar} about "
                f"{self.expected_days:.0f} of them would have had rows, and a pause this long "
                f"has a chance {chance}): the monitor has no data to judge the model on — are "
                "the rows still arriving?")

    def as_dict(self) -> dict[str, Any]:
        return {**asdict(self), "sentence": self.sentence()}


@dataclass(frozen=True)
class RisingRejections:
    """The last days' share of rejected rows far above the long run's."""

    days: int  # the recent window
    recent_rejected: int
    recent_read: int
    past_rejected: int
    past_read: int
    past_share: float
    pvalue: float
    reasons: tuple[ReasonCount, ...]  # of the recent rejections, the commonest first
    example: RejectedExample | None

    @property
    def recent_share(self) -> float:
        return self.recent_rejected / self.recent_read

    def short(self) -> str:
        return "more rows rejected than usual"

    def sentence(self) -> str:
        text = (f"{self.short()}: {percent(self.recent_share, 1)} of the {self.recent_read:,} "
                f"rows of the last {self.days} days ({self.recent_rejected:,}), against "
                f"{percent(self.past_share, 1)} before ({fmt_p(self.pvalue)})")
        return text + _why(self.reasons, self.example)

    def as_dict(self) -> dict[str, Any]:
        return {"days": self.days, "recent_rejected": self.recent_rejected,
                "recent_read": self.recent_read, "recent_share": self.recent_share,
                "past_rejected": self.past_rejected, "past_read": self.past_read,
                "past_share": self.past_share, "pvalue": self.pvalue,
                **_why_dict(self.reasons, self.example), "sentence": self.sentence()}


@dataclass(frozen=True)
class DataHealth:
    """One model's data findings at one moment (none: nothing to say)."""

    model: str
    silent: SilentFeed | None = None
    bad_files: tuple[BadFile, ...] = ()
    rising: RisingRejections | None = None

    @property
    def stands(self) -> bool:
        """Whether any finding stands (``check --fail-on watch`` then exits 3)."""
        return bool(self.silent or self.bad_files or self.rising)

    def sentences(self) -> list[str]:
        out = [self.silent.sentence()] if self.silent else []
        out += [f.sentence() for f in self.bad_files]
        return out + ([self.rising.sentence()] if self.rising else [])

    def headline(self) -> str:
        """The findings in a few words ('no rows since 2026-03-10; b.csv rejected whole')."""
        parts = [self.silent.short()] if self.silent else []
        parts += [f.short() for f in self.bad_files]
        return "; ".join(parts + ([self.rising.short()] if self.rising else []))

    def as_dict(self) -> dict[str, Any]:
        return {"stands": self.stands,
                "silent": self.silent.as_dict() if self.silent else None,
                "bad_files": [f.as_dict() for f in self.bad_files],
                "rising": self.rising.as_dict() if self.rising else None}
