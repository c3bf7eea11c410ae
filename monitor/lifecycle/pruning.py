"""``fitwatch prune`` and the nightly prune: delete raw rows past the retention horizon.

``storage.keep_rows_days`` = N keeps the rows of the last N days through each model's last
checked day; older rows (and the replaced values of corrections on those days) are deleted, one
transaction per model, each prune an audit entry. What stays is what the nights need: day
statistics (fits, windows, sup-F history), the checks and their carried state (charts, coverage
window), versions with their fit window's statistics and diagnosis, batches and rejected rows
(data health), the audit log. See :mod:`monitor.store.retention` for what is never pruned.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime
from typing import Any

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.errors import InputError
from monitor.store import audit
from monitor.store.access import database
from monitor.store.engine import write_transaction
from monitor.store.model_lock import model_lock
from monitor.store.models import get_model, list_models
from monitor.store.retention import Prunable, delete_rows_through, last_prune, prunable

NIGHTLY_BATCH_DAYS = 7  # the nightly run prunes once a week's worth of days is past the horizon


@dataclass(frozen=True)
class ModelPrune:
    """What a prune did (or, dry, would do) to one model."""

    model: str
    through: date | None  # the last day whose rows go (None: nothing may go)
    rows: int = 0
    replaced_rows: int = 0
    days: int = 0
    first: date | None = None  # the oldest day that lost rows
    dry_run: bool = False
    why_not: str = ""

    def as_dict(self) -> dict[str, Any]:
        return {"model": self.model, "through": self.through, "first": self.first,
                "rows": self.rows, "replaced_rows": self.replaced_rows, "days": self.days,
                "dry_run": self.dry_run, "note": self.why_not or None}

    def sentence(self) -> str:
        if not self.rows and not self.replaced_rows:
            return f"{self.model}: nothing to prune ({self.why_not or 'no rows past the horizon'})"
        verb = "would remove" if self.dry_run else "removed"
        span = (f"{self.first.isoformat()} to " if self.first and self.first != self.through
                else "")
        assert self.through is not None
        extra = (f" and {self.replaced_rows} replaced value(s)" if self.replaced_rows else "")
        return (f"{self.model}: {verb} {self.rows} row(s){extra} on {self.days} day(s), "
                f"{span}{self.through.isoformat()}; rows are kept from "
                f"{date.fromordinal(self.through.toordinal() + 1).isoformat()}")


def prune(settings: Settings, names: Sequence[str] | None = None, *,
          before: date | None = None, dry_run: bool = False, now: datetime | None = None,
          actor: str | None = None, engine: Engine | None = None) -> list[ModelPrune]:
    """``fitwatch prune``: rows past ``storage.keep_rows_days`` (or before ``before``)."""
    keep = settings.storage.keep_rows_days or None
    if keep is None and before is None:
        raise InputError("nothing to prune by: storage.keep_rows_days is 0 (every row is kept); "
                         "set it in the settings file or give --before DATE")
    with database(settings, engine) as db:
        with db.connect() as conn:
            models = [get_model(conn, n) for n in names] if names else list_models(conn)
        return [prune_model(db, m.id, m.name, keep_days=keep, before=before, dry_run=dry_run,
                            now=now or datetime.now(UTC), actor=actor or "unknown")
                for m in models]


def prune_model(engine: Engine, model_id: int, name: str, *, keep_days: int | None,
                before: date | None = None, dry_run: bool = False, now: datetime,
                actor: str, at_least_days: int = 1) -> ModelPrune:
    """Prune one model in one transaction (recorded in the audit log); ``at_least_days``: leave
    it alone until that many days are past the horizon (the nightly run prunes weekly)."""
    with model_lock(engine, model_id, name), write_transaction(engine) as conn:
        found = prunable(conn, model_id, keep_days=keep_days, before=before)
        if not found.rows and not found.replaced_rows:
            return _result(name, found, dry_run)
        assert found.through is not None and found.first is not None
        if (found.through - found.first).days + 1 < at_least_days:
            return ModelPrune(name, None, why_not=f"fewer than {at_least_days} days past the "
                                                  "horizon")
        if dry_run:
            return _result(name, found, dry_run)
        rows, replaced = delete_rows_through(conn, model_id, found.through)
        earlier = last_prune(conn, model_id)
        through = max(found.through, earlier.through) if earlier else found.through
        audit.record(conn, action="prune", actor=actor, at=now, model_id=model_id,
                     details={"through": through.isoformat(), "first": found.first.isoformat(),
                              "rows": rows, "replaced_rows": replaced, "days": found.days,
                              "keep_rows_days": keep_days,
                              "before": before.isoformat() if before else None})
    return ModelPrune(name, found.through, rows, replaced, found.days, found.first)


def _result(name: str, found: Prunable, dry_run: bool) -> ModelPrune:
    return ModelPrune(name, found.through, found.rows, found.replaced_rows, found.days,
                      found.first, dry_run, found.why_not)

