"""What an ingestion did, for people (a sentence) and for machines (``ingest --json``)."""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from datetime import date
from typing import Any

from monitor.ingest.reasons import REASONS, Rejection, ranked

EXAMPLES_PER_REASON = 3
REASONS_NAMED = 3


@dataclass(frozen=True)
class Example:
    """One rejected row shown in a summary."""

    line: int
    code: str  # the reason code (see monitor.ingest.reasons.REASONS)
    detail: str


@dataclass(frozen=True)
class IngestSummary:
    """The outcome of ingesting one file (or one query run). ``read`` always balances."""

    model: str
    source: str
    batch_id: int | None
    read: int
    accepted: int
    duplicates: int
    rejected: int
    reasons: Mapping[str, int]
    examples: tuple[Example, ...]
    first_day: date | None
    last_day: date | None
    affected_days: tuple[date, ...]
    already_ingested: bool = False
    strict: bool = False
    # complete | rejected: nothing of the file stored, its rows all bad (or one, under --strict)
    status: str = "complete"
    replaced: int = 0  # of the accepted rows, those that replaced stored values (--replace)

    def __post_init__(self) -> None:
        if self.read != self.accepted + self.duplicates + self.rejected:
            raise ValueError(f"unbalanced summary for {self.source}: read {self.read} != "
                             f"{self.accepted} + {self.duplicates} + {self.rejected}")
        if sum(self.reasons.values()) != self.rejected:
            raise ValueError(f"reason counts of {self.source} do not add up to {self.rejected}")

    @property
    def rejected_whole(self) -> bool:
        """Nothing of the file was stored because of its rows (every one bad, or --strict)."""
        return self.status == "rejected"

    @property
    def bad_share(self) -> float:
        """The share of the rows read that were bad (not those rejected with a --strict file)."""
        bad = self.rejected - self.reasons.get("file_rejected", 0)
        return bad / self.read if self.read else 0.0

    def as_dict(self) -> dict[str, Any]:
        """The ``ingest --json`` document."""
        return {
            "model": self.model, "source": self.source, "batch_id": self.batch_id,
            "status": self.status, "strict": self.strict,
            "already_ingested": self.already_ingested,
            "read": self.read, "accepted": self.accepted, "replaced": self.replaced,
            "duplicates": self.duplicates,
            "rejected": self.rejected, "reasons": dict(self.reasons),
            "examples": [{"line": e.line, "code": e.code, "detail": e.detail}
                         for e in self.examples],
            "first_day": _iso(self.first_day), "last_day": _iso(self.last_day),
            "affected_days": [d.isoformat() for d in self.affected_days],
        }

    def sentence(self) -> str:
        """One line for people, naming the worst reasons with line numbers."""
        counts = f"{_n(self.read, 'row')} read"
        if self.read == 0:
            return f"{self.source}: a header without rows: a night without rows, nothing to store."
        if self.already_ingested and self.status == "rejected":
            return (f"{self.source}: rejected whole before (batch {self.batch_id}); nothing "
                    f"changed ({counts}).")
        if self.already_ingested and self.batch_id is None:
            return f"{self.source}: nothing new ({counts}, all stored before)."
        if self.already_ingested:
            again = f", {self.rejected:,} rejected as before" if self.rejected else ""
            return (f"{self.source}: already ingested (batch {self.batch_id}); nothing changed "
                    f"({counts}, {self.duplicates:,} already stored{again}).")
        if self.status == "rejected":
            bad = self.rejected - self.reasons.get("file_rejected", 0)
            rows = counts.removesuffix(" read")
            if bad < self.read:
                return (f"{self.source}: rejected whole (--strict), nothing stored: {bad:,} of "
                        f"{rows} {'is' if bad == 1 else 'are'} bad — {self._worst()}.")
            every = "the 1 row is" if self.read == 1 else f"all {rows} are"
            return (f"{self.source}: rejected whole, nothing stored: {every} bad — "
                    f"{self._worst()}{self._example()}.")
        replaced = (f" ({self.replaced:,} replacing stored values, kept in the audit trail)"
                    if self.replaced else "")
        text = (f"{self.source}: {counts}: {self.accepted:,} stored{replaced}, "
                f"{_n(self.duplicates, 'duplicate')} skipped, {self.rejected:,} rejected")
        if self.rejected:
            text += f" — {self._worst()}"
        if self.first_day is not None:
            first, last = self.first_day.isoformat(), _iso(self.last_day)
            text += f"; day {first}" if first == last else f"; days {first} to {last}"
        return text + "."

    def why(self) -> str:
        """The commonest reasons for rejection, and an example of the first ('' if none)."""
        return self._worst() + self._example()

    def _example(self) -> str:
        """The first shown row of the commonest reason, as '; e.g. line 2: why'."""
        for code, _ in ranked(self.reasons)[:1]:
            for e in self.examples:
                if e.code == code:
                    return f"; e.g. line {e.line}: {e.detail}"
        return ""

    def _worst(self) -> str:
        worst = ranked(self.reasons)
        parts = []
        for code, count in worst[:REASONS_NAMED]:
            lines = [e.line for e in self.examples if e.code == code]
            where = ""
            if lines:
                more = ", …" if count > len(lines) else ""
                label = "line" if len(lines) == 1 and not more else "lines"
                where = f" ({label} {', '.join(str(x) for x in lines)}{more})"
            parts.append(f"{count:,} {REASONS[code]}{where}")
        if len(worst) > REASONS_NAMED:
            parts.append(f"{sum(n for _, n in worst[REASONS_NAMED:]):,} other")
        return "; ".join(parts)


@dataclass
class Tally:
    """Running counts of an ingestion (internal to the service)."""

    read: int = 0
    accepted: int = 0
    replaced: int = 0  # of the accepted
    duplicates: int = 0
    reasons: Counter[str] = field(default_factory=Counter)
    examples: dict[str, list[Example]] = field(default_factory=dict)
    days: set[date] = field(default_factory=set)

    @property
    def rejected(self) -> int:
        return sum(self.reasons.values())

    def reject(self, rows: Iterable[Rejection]) -> None:
        for row in rows:
            self.reasons[row.reason] += 1
            shown = self.examples.setdefault(row.reason, [])
            if len(shown) < EXAMPLES_PER_REASON:
                shown.append(Example(row.line, row.reason, row.detail))

    def reject_file(self) -> None:
        """Under ``--strict``: every row that was not bad is rejected with the file."""
        kept = self.accepted + self.duplicates
        self.accepted = self.duplicates = self.replaced = 0
        self.days.clear()
        if kept:
            self.reasons["file_rejected"] += kept

    def summary(self, model: str, source: str, batch_id: int | None, *, strict: bool,
                status: str, already: bool) -> IngestSummary:
        days = tuple(sorted(self.days))
        examples = tuple(sorted((e for shown in self.examples.values() for e in shown),
                                key=lambda e: (e.line, e.code)))
        return IngestSummary(
            model=model, source=source, batch_id=batch_id, read=self.read,
            accepted=self.accepted, duplicates=self.duplicates, rejected=self.rejected,
            reasons=dict(sorted(self.reasons.items())), examples=examples,
            first_day=days[0] if days else None, last_day=days[-1] if days else None,
            affected_days=days, already_ingested=already, strict=strict, status=status,
            replaced=self.replaced)


def _n(count: int, noun: str) -> str:
    return f"{count:,} {noun}" + ("" if count == 1 else "s")


def _iso(day: date | None) -> str | None:
    return None if day is None else day.isoformat()

