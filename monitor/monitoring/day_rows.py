"""The rows behind one day's figures, each scored as the nightly check scored it.

A checked day is scored by the version its stored check names (the one in force that day, even
when another is active now); a day not checked yet by the active version. The scores come from
the version's :meth:`~monitor.stats.prediction.PredictionModel.score` at the version's level,
the call :func:`monitor.monitoring.evaluate.evaluate_day` makes, so the rows outside their
interval are exactly the misses the check counted, as long as no rows arrived after it.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import Connection, Engine

from monitor.config import Settings
from monitor.domain.check import DayCheck
from monitor.domain.model import ModelRecord
from monitor.domain.version import Version
from monitor.errors import NotFoundError, StateError
from monitor.stats.prediction import Scores
from monitor.store.access import database
from monitor.store.batches import BatchRecord, get_batch
from monitor.store.checks import load_checks
from monitor.store.models import get_model
from monitor.store.observations import DayRows, day_revision, load_day_rows
from monitor.store.retention import kept_from, pruned_on
from monitor.store.row_days import neighbour_days
from monitor.store.versions import active_version, version_by_id

BoolArray = NDArray[np.bool_]


@dataclass(frozen=True)
class RowFilter:
    """Which rows to show; each filter given narrows the list (both: rows that are both)."""

    missed: bool = False  # outside their prediction interval
    extrapolated: bool = False  # a predictor outside the fit window's range

    def mask(self, scores: Scores) -> BoolArray:
        keep = np.ones(scores.n, dtype=bool)
        if self.missed:
            keep &= ~scores.inside
        if self.extrapolated:
            keep &= scores.extrapolated
        return keep

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(n for n, on in (("missed", self.missed),
                                     ("extrapolated", self.extrapolated)) if on)


@dataclass(frozen=True, eq=False)
class ScoredDay:
    """One model-day's stored rows with the scores of the version that checks the day."""

    model: ModelRecord
    day: date
    version: Version
    check: DayCheck | None  # the day's stored check (None: not checked yet)
    revision: int  # the day's rows revision now (the check records the one it saw)
    rows: DayRows
    scores: Scores
    shown: BoolArray  # the rows the filter keeps
    only: RowFilter
    batches: tuple[BatchRecord, ...]  # the batches that stored the day's rows
    active: int | None  # the number of the version active now

    @property
    def level(self) -> float:
        return self.version.level

    @property
    def missed(self) -> int:
        return self.scores.n - self.scores.covered

    @property
    def rows_since_check(self) -> bool:
        """Rows arrived after the day was checked: the next check scores it again."""
        return self.check is not None and self.check.stats_revision != self.revision


def score_day(settings: Settings, name: str, day: date, *, only: RowFilter = RowFilter(),
              engine: Engine | None = None) -> ScoredDay:
    """The stored rows of model ``name`` on ``day``, scored; ``only`` picks the rows shown."""
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        model = get_model(conn, name)
        rows = load_day_rows(conn, model, day)
        if len(rows) == 0:
            raise NotFoundError(_no_rows(conn, model, day))
        checks = load_checks(conn, model.id, day, day, model=model.name)
        check = checks[0] if checks else None
        active = active_version(conn, model.id)
        version = version_by_id(conn, check.version_id) if check is not None else active
        if version is None:
            raise StateError(f"'{name}' has no active version to score rows with; fit one "
                             f"with 'fitwatch model fit {name} ...'")
        revision = day_revision(conn, model, day)
        batches = tuple(get_batch(conn, int(b)) for b in np.unique(rows.batch_ids))
    scores = version.prediction_model().score(rows.x, rows.y, version.level)
    return ScoredDay(model, day, version, check, revision, rows, scores, only.mask(scores),
                     only, batches, active.number if active is not None else None)


def _no_rows(conn: Connection, model: ModelRecord, day: date) -> str:
    pruned = pruned_on(conn, model.id, day) if day_revision(conn, model, day) else None
    if pruned is not None:
        kept = kept_from(conn, model.id)
        return (f"the rows of '{model.name}' for {day.isoformat()} were pruned by retention on "
                f"{pruned.date().isoformat()} (rows are kept from "
                f"{kept.isoformat() if kept else '?'}); the day's check is kept: "
                f"'fitwatch days {model.name} --from {day.isoformat()} --through "
                f"{day.isoformat()}'")
    before, after = neighbour_days(conn, model, day)
    near = [f"{d.isoformat()} ({'before' if d < day else 'after'})"
            for d in (before, after) if d is not None]
    hint = (f"the nearest days with rows: {' and '.join(near)}" if near
            else "it has no stored rows on any day")
    return f"'{model.name}' has no rows stored for {day.isoformat()}; {hint}"
