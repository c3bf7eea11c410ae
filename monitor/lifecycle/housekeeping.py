"""Renaming and deleting a model: each one audited transaction."""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import UTC, datetime

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.phrasing import counted
from monitor.errors import UsageError
from monitor.store import audit
from monitor.store.access import database
from monitor.store.engine import write_transaction
from monitor.store.models import delete_model, get_model, rename_model


@dataclass(frozen=True)
class Removed:
    model: str
    counts: dict[str, int]

    def sentence(self) -> str:
        c = self.counts
        return (f"model '{self.model}' deleted with its {counted(c['observations'], 'observation')}"
                f", {counted(c['versions'], 'version')} and "
                f"{counted(c['day_checks'], 'day check')}; the audit log keeps what was done to it")


def delete(settings: Settings, name: str, *, confirmed: bool, actor: str,
           now: datetime | None = None, engine: Engine | None = None) -> Removed:
    """``model delete NAME --yes``: remove a model and everything stored for it."""
    if not confirmed:
        raise UsageError(f"deleting '{name}' removes its observations, versions and checks for "
                         "good; add --yes to confirm")
    now = now or datetime.now(UTC)
    with database(settings, engine, sections="warn") as db, write_transaction(db) as conn:
        model = get_model(conn, name)
        counts = delete_model(conn, model)
        audit.record(conn, action="delete", actor=actor, at=now, model_id=None,
                     details={"model": name, **counts})
    return Removed(name, counts)


def rename(settings: Settings, name: str, new_name: str, *, actor: str,
           now: datetime | None = None, engine: Engine | None = None) -> str:
    """``model rename NAME NEW``; returns the sentence to print."""
    now = now or datetime.now(UTC)
    with database(settings, engine, sections="warn",
                  creating=new_name) as db, write_transaction(db) as conn:
        model = get_model(conn, name)
        replace(model.spec, name=new_name)  # the rules of a model name (InputError otherwise)
        rename_model(conn, model, new_name)
        audit.record(conn, action="rename", actor=actor, at=now, model_id=model.id,
                     details={"from": name, "to": new_name})
    section = (f"; rename its settings section [models.{name}] to [models.{new_name}]"
               if name in settings.models else "")
    return f"model '{name}' is now '{new_name}'{section}"
