"""The ``model list`` view: each model's formula, versions and last status, one line each.

It reads version numbers and the last status from their columns (``monitor.store.standing``),
never whole versions or checks, so it needs neither numpy nor the statistics modules.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date
from typing import Any

from sqlalchemy import Engine

from monitor.config import Settings
from monitor.domain.version_state import VersionState
from monitor.store.access import database
from monitor.store.models import list_models
from monitor.store.standing import last_status, version_numbers


@dataclass(frozen=True)
class ModelLine:
    name: str
    formula: str
    active_version: int | None
    versions: int
    status: str | None
    last_checked_day: date | None
    checked_version: int | None = None  # the version the last check scored with

    def as_dict(self) -> dict[str, Any]:
        return {"model": self.name, "formula": self.formula,
                "active_version": self.active_version, "versions": self.versions,
                "status": self.status, "last_checked_day": self.last_checked_day,
                "last_check_version": self.checked_version}

    def sentence(self) -> str:
        active = f"v{self.active_version}" if self.active_version else "no active version"
        state = "not checked yet"
        if self.status:
            under = (f" under v{self.checked_version}"
                     if self.checked_version != self.active_version else "")
            state = f"{self.status}{under} (checked through {self.last_checked_day})"
        return f"{self.name}: {self.formula}; {active} of {self.versions}; {state}"


def list_model_lines(settings: Settings, *, engine: Engine | None = None) -> list[ModelLine]:
    out = []
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        for model in list_models(conn):
            versions = version_numbers(conn, model.id)
            active = next((v for v in versions if v.state == VersionState.ACTIVE), None)
            last = last_status(conn, model.id)
            checked = next((v.number for v in versions
                            if last is not None and v.id == last.version_id), None)
            out.append(ModelLine(model.name,
                                 f"{model.response} ~ {' + '.join(model.predictors)}",
                                 active.number if active else None, len(versions),
                                 last.status if last else None, last.day if last else None,
                                 checked))
    return out
