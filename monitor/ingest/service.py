"""Ingestion: store a model's observations from files or an SQL query (the inbox: inbox.py).

One transaction per file: the batch row, the new observations, the rejected rows and the merged
day statistics are committed together or not at all. Rows are keyed by the model's id column or,
without one, by a hash of their content; a row whose key is already stored is a duplicate when
its values are equal and a conflict (rejected) when they differ, whether the earlier row came
from another file or from this one. Re-ingesting a file that adds nothing leaves no trace.

A corrected file is ingested with ``replace``: where a key stored by another file comes with
other values, the new values win; the old ones are kept in ``replaced_rows``, the correction is
audited, and the days whose rows changed get restated statistics with a new revision, so the
next check checks them again from the earliest one.
"""

from __future__ import annotations

import logging
import os
import sys
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from typing import cast
from zoneinfo import ZoneInfo

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import Connection, Engine
from tqdm import tqdm

from monitor.config import Settings
from monitor.domain.model import ModelRecord, check_model_section
from monitor.errors import FitwatchError, StateError, UsageError
from monitor.ingest.pipeline import prefetch
from monitor.ingest.readers import RawChunk, Source, open_file
from monitor.ingest.reasons import Rejection
from monitor.ingest.summary import IngestSummary, Tally
from monitor.ingest.validate import CheckedRows, Rules, check_rows
from monitor.stats.moments import DayMoments, Moments
from monitor.store import audit
from monitor.store.access import database
from monitor.store.batches import (
    add_rejected_rows,
    find_batches_by_hash,
    finish_batch,
    start_batch,
)
from monitor.store.engine import write_transaction
from monitor.store.models import find_model_by_id, get_model
from monitor.store.observations import (
    InsertResult,
    PreparedRows,
    delete_batch_observations,
    insert_observations,
    keys_rising,
    merge_day_stats,
    prepare_rows,
    replace_observations,
    restate_day_stats,
    undo_replacements,
)
from monitor.store.retention import kept_from
from monitor.store.row_days import last_observed_at

log = logging.getLogger(__name__)

__all__ = ["IngestOptions", "IngestSummary", "ingest_configured_source", "ingest_file",
           "ingest_paths", "ingest_query", "ingest_source", "options_for"]


@dataclass(frozen=True)
class IngestOptions:
    """How to validate and store rows."""

    timezone: ZoneInfo
    ranges: Mapping[str, tuple[float, float]]
    strict: bool
    now: datetime
    future_tolerance: timedelta
    chunk_rows: int
    progress: bool
    earliest_day: date = date(1990, 1, 1)  # settings: ingest.earliest_day
    replace: bool = False  # ingest --replace: new values win over stored ones (corrections)
    actor: str = ""  # who corrects (the audit entry of a replacement)

    def __post_init__(self) -> None:
        if self.now.tzinfo is None:
            raise ValueError("IngestOptions.now must be an aware datetime")
        if self.chunk_rows < 1:
            raise ValueError("chunk_rows must be positive")


def options_for(settings: Settings, name: str, *, strict: bool = False, progress: bool = False,
                now: datetime | None = None, replace: bool = False,
                actor: str = "") -> IngestOptions:
    """The ingestion options of model ``name`` under ``settings``."""
    return IngestOptions(
        timezone=settings.timezone, ranges=settings.for_model(name).ranges, strict=strict,
        now=now or datetime.now(UTC), future_tolerance=settings.ingest.future_tolerance,
        chunk_rows=settings.ingest.chunk_rows, progress=progress,
        earliest_day=settings.ingest.earliest_day, replace=replace, actor=actor)


# entry points -----------------------------------------------------------------------------------
def ingest_paths(settings: Settings, name: str, paths: Sequence[str | os.PathLike[str]], *,
                 strict: bool = False, progress: bool = False, now: datetime | None = None,
                 replace: bool = False, actor: str = "") -> list[IngestSummary]:
    """Ingest files for model ``name``; one summary per file, in order.

    Every file is opened and its header checked before the first is stored, so a missing file
    or column changes nothing. ``replace``: a corrected file's values win (see the module).
    """
    with database(settings) as engine:
        with engine.connect() as conn:
            model = get_model(conn, name)
        check_model_section(settings, model)
        if replace and not model.id_column:
            raise UsageError(f"'{name}' has no id column: its rows are keyed by their content, "
                             "so a corrected row is a new row, not a replacement; --replace "
                             "needs a model fitted with --id")
        options = options_for(settings, name, strict=strict, progress=progress, now=now,
                              replace=replace, actor=actor)
        sources = [_open(model, path, options) for path in paths]
        summaries: list[IngestSummary] = []
        for source in sources:
            try:
                summaries.append(ingest_source(engine, model, source, options))
            except FitwatchError as exc:
                if summaries:
                    done = ", ".join(s.source for s in summaries)
                    exc.args = (f"{exc} (stored before this error: {done})",)
                raise
        return summaries


def ingest_file(engine: Engine, model: ModelRecord, path: str | os.PathLike[str],
                options: IngestOptions) -> IngestSummary:
    """Ingest one CSV or Parquet file in one transaction."""
    return ingest_source(engine, model, _open(model, path, options), options)


def ingest_configured_source(settings: Settings, name: str, *, now: datetime | None = None,
                             engine: Engine | None = None) -> IngestSummary:
    """Run model ``name``'s configured SQL source (``[models.NAME.source]``) and store the rows."""
    source = settings.for_model(name).source
    if source is None:
        raise UsageError(f"model '{name}' has no SQL source; add a [models.{name}.source] "
                         "section with url (or url_env) and query to the settings")
    with database(settings, engine) as db:
        with db.connect() as conn:
            model = get_model(conn, name)
        check_model_section(settings, model)
        return ingest_query(db, model, source.resolved_url(), source.query,
                            options_for(settings, name, now=now),
                            timeout_seconds=source.timeout_seconds)


def ingest_query(engine: Engine, model: ModelRecord, source_url: str, query: str,
                 options: IngestOptions, *, timeout_seconds: float = 300.0) -> IngestSummary:
    """Ingest the rows of an SQL query against another database.

    The query may use ``:since``: the latest stored observation time of the model (an aware
    UTC datetime; 1970-01-01 when nothing is stored). Rows already stored are duplicates, so
    an overlapping window (``>=``) is harmless. The query is cancelled after
    ``timeout_seconds``.
    """
    from monitor.ingest.query import QuerySource

    with engine.connect() as conn:
        since = last_observed_at(conn, model) or datetime(1970, 1, 1, tzinfo=UTC)
    source = QuerySource(source_url, query, {"since": since}, model.columns,
                         options.chunk_rows, id_column=model.id_column,
                         timeout_seconds=timeout_seconds)
    return ingest_source(engine, model, source, options)


def ingest_source(engine: Engine, model: ModelRecord, source: Source,
                  options: IngestOptions) -> IngestSummary:
    """Ingest any :class:`Source` in one transaction."""
    try:
        # Every row written refers to the model, held below until the commit, or to the batch
        # created in this transaction: SQLite's per-row reference checks are moot (and the
        # observations have none; migration 0007).
        with write_transaction(engine, foreign_keys=False) as conn:
            current = find_model_by_id(conn, model.id, hold=True)
            if current is None or current.spec != model.spec:
                raise StateError(f"model '{model.name}' changed or vanished while ingesting; "
                                 "try again")
            summary = _ingest(conn, model, source, options)
            if summary.already_ingested:
                raise _Unchanged(summary)
    except _Unchanged as unchanged:
        summary = unchanged.summary
    log.info("%s", summary.sentence())
    return summary


class _Unchanged(Exception):  # control flow: roll back, then report the summary
    def __init__(self, summary: IngestSummary):
        super().__init__(summary.source)
        self.summary = summary


def _open(model: ModelRecord, path: str | os.PathLike[str], options: IngestOptions) -> Source:
    return open_file(path, model.columns, options.chunk_rows, time_column=model.time_column,
                     id_column=model.id_column)


# the work ---------------------------------------------------------------------------------------
def _ingest(conn: Connection, model: ModelRecord, source: Source,
            options: IngestOptions) -> IngestSummary:
    rules = Rules(options.timezone, options.ranges, options.now, options.future_tolerance,
                  options.earliest_day, kept_from(conn, model.id))
    batch_id = start_batch(conn, model.id, source.location, source.content_hash(), source.size,
                           options.strict, options.now)
    tally = Tally()
    days = _DayTotals(model.k + 1)
    changed: set[date] = set()  # days whose stored rows a correction replaced or moved
    prepared = prefetch(_prepare(chunk, model, rules) for chunk in source.chunks())
    with tqdm(total=source.total, unit=source.unit, unit_scale=True, desc=source.label,
              disable=not options.progress, leave=False, file=sys.stderr) as bar:
        for part in prepared:
            result = insert_observations(conn, model, batch_id, part.driver_rows)
            duplicates, conflicts, replacing = _judge(model, part.checked, part.fresh,
                                                      part.first, result, batch_id, rules,
                                                      replace=options.replace)
            if len(replacing):  # now, so a later chunk meets the new values as this file's
                fixed = part.checked.take(replacing)
                changed |= replace_observations(
                    conn, model, batch_id,
                    prepare_rows(fixed.keys, fixed.observed_us, fixed.days, fixed.x, fixed.y),
                    options.now)
            rejections = [*part.checked.rejected, *conflicts]
            tally.read += part.checked.read
            tally.accepted += int(result.inserted.sum()) + len(replacing)
            tally.replaced += len(replacing)
            tally.duplicates += duplicates
            tally.reject(rejections)
            if result.inserted.all():
                days.add(part.moments)
            else:
                days.add(_moments(part.rows.take(result.inserted)))
            add_rejected_rows(conn, batch_id, [(r.line, r.raw, r.reason, r.detail)
                                               for r in sorted(rejections, key=_by_line)])
            bar.update(part.progress)
    status = "complete"
    if options.strict and tally.rejected:
        undo_replacements(conn, model, batch_id)
        delete_batch_observations(conn, batch_id)
        tally.reject_file()
        status = "rejected"
    else:
        merge_day_stats(conn, model, days.moments(), options.now)
        restate_day_stats(conn, model, changed, options.now)
        tally.days.update(days.days())
        tally.days.update(changed)
        if tally.replaced:
            audit.record(conn, action="correct", actor=options.actor or "fitwatch",
                         at=options.now, model_id=model.id, effective_day=min(changed),
                         details={"batch": batch_id, "source": source.label,
                                  "replaced": tally.replaced,
                                  "days": [d.isoformat() for d in sorted(changed)]})
        if tally.read and tally.rejected == tally.read:  # every row bad: nothing of it stored
            status = "rejected"
    file_hash = source.content_hash()
    earlier = find_batches_by_hash(conn, model.id, file_hash) if file_hash else []
    seen = bool(earlier) and earlier[0].status == status
    nothing_new = not source.record_repeats and tally.rejected == 0
    unchanged = tally.accepted == 0 and (seen or nothing_new)
    first, last = (min(tally.days), max(tally.days)) if tally.days else (None, None)
    finish_batch(conn, batch_id, status=status, read=tally.read, accepted=tally.accepted,
                 duplicates=tally.duplicates, rejected=tally.rejected, reasons=tally.reasons,
                 first_day=first, last_day=last, file_hash=file_hash, now=options.now)
    shown = (earlier[0].id if seen else None) if unchanged else batch_id
    return tally.summary(model.name, source.label, shown,
                         strict=options.strict, status=status, already=unchanged)


@dataclass(frozen=True, eq=False)
class _Prepared:
    """A chunk validated and made ready for the database (in the reading thread)."""

    checked: CheckedRows
    fresh: NDArray[np.bool_]  # rows holding the first occurrence of their key in the chunk
    first: NDArray[np.intp]  # for every row, the row of its key's first occurrence
    rows: CheckedRows  # the fresh rows
    driver_rows: PreparedRows
    moments: DayMoments  # day statistics of the fresh rows
    progress: int


def _prepare(chunk: RawChunk, model: ModelRecord, rules: Rules) -> _Prepared:
    checked = check_rows(chunk, model, rules)
    fresh, first = _first_of_each_key(checked)
    rows = checked if fresh.all() else checked.take(fresh)
    return _Prepared(checked, fresh, first, rows,
                     prepare_rows(rows.keys, rows.observed_us, rows.days, rows.x, rows.y),
                     _moments(rows), chunk.progress)


def _moments(rows: CheckedRows) -> DayMoments:
    return DayMoments.from_rows(rows.days, np.column_stack([rows.x, rows.y]))


def _by_line(rejection: Rejection) -> int:
    return rejection.line


def _first_of_each_key(checked: CheckedRows) -> tuple[NDArray[np.bool_], NDArray[np.intp]]:
    """Which rows hold the first occurrence of their key, and for every row that first row."""
    n, keys = len(checked), checked.keys
    if keys_rising(keys) or len(set(keys.tolist())) == n:
        return np.ones(n, dtype=bool), np.arange(n)
    _, first_rows, codes = np.unique(keys.astype(str), return_index=True,
                                     return_inverse=True)  # first_rows: each key's first row
    first = first_rows[codes.ravel()]
    return first == np.arange(n), first


def _judge(model: ModelRecord, checked: CheckedRows, fresh: NDArray[np.bool_],
           first: NDArray[np.intp], result: InsertResult, batch_id: int,
           rules: Rules, *, replace: bool = False
           ) -> tuple[int, list[Rejection], NDArray[np.intp]]:
    """Count the duplicates (same key, same values) and reject the conflicts (other values);
    with ``replace``, a row whose key another batch stored with other values replaces it
    instead (the rows to replace are returned, as positions in ``checked``).

    A first occurrence in the chunk that was not stored is compared with the stored row; a
    later occurrence with its first one (and shares its fate when equal to it).
    """
    n = len(checked)
    verdict = np.zeros(n, dtype=np.int8)  # 0 stored, 1 duplicate, 2 conflict, 3 replaces
    against: dict[int, tuple[str, tuple[float, ...]]] = {}
    where_fresh = np.flatnonzero(fresh)
    if len(result.positions):  # keys stored before: in another batch or earlier in this file
        rows = where_fresh[result.positions]
        stored = np.column_stack([result.x, result.y])
        same = ((checked.observed_us[rows] == result.observed_us)
                & np.all(np.column_stack([checked.x[rows], checked.y[rows]]) == stored, axis=1))
        elsewhere = result.batch_id != batch_id
        verdict[rows] = np.where(same, 1, np.where(replace & elsewhere, 3, 2))
        for i in np.flatnonzero(~same & ~(replace & elsewhere)):
            where = ("earlier in this file" if result.batch_id[i] == batch_id
                     else f"in batch {int(result.batch_id[i])}")
            values = (int(result.observed_us[i]), *result.x[i].tolist(), float(result.y[i]))
            against[int(rows[i])] = (where, values)
    repeats = np.flatnonzero(~fresh)
    if len(repeats):  # later occurrences of a key within this chunk
        firsts = first[repeats]
        same = ((checked.observed_us[repeats] == checked.observed_us[firsts])
                & (checked.y[repeats] == checked.y[firsts])
                & np.all(checked.x[repeats] == checked.x[firsts], axis=1))
        verdict[repeats] = np.where(same, np.where(verdict[firsts] == 2, 2, 1), 2)
        for i, j, equal in zip(repeats, firsts, same, strict=True):
            if not equal:
                against[int(i)] = (f"on line {checked.lines[j]}", _values(checked, int(j)))
            elif verdict[j] == 2:
                against[int(i)] = against[int(j)]
    conflicts = [_conflict(model, checked, i, where, values, rules)
                 for i, (where, values) in sorted(against.items())]
    return int((verdict == 1).sum()), conflicts, np.flatnonzero(verdict == 3)


def _values(rows: CheckedRows, i: int) -> tuple[float, ...]:
    return (int(rows.observed_us[i]), *rows.x[i].tolist(), float(rows.y[i]))


def _conflict(model: ModelRecord, rows: CheckedRows, i: int, where: str,
              other: tuple[float, ...], rules: Rules) -> Rejection:
    names = [model.time_column, *model.predictors, model.response]
    diffs = []
    for name, mine, theirs in zip(names, _values(rows, i), other, strict=True):
        if mine == theirs:
            continue
        if name == model.time_column:
            diffs.append(f"{name} {_local(int(mine), rules.zone)} here, "
                         f"{_local(int(theirs), rules.zone)} there")
        else:
            diffs.append(f"{name} {mine:g} here, {theirs:g} there")
    key = (f"{model.id_column} '{rows.keys[i]}'" if model.id_column
           else "a row with the same content key")
    return Rejection(int(rows.lines[i]), rows.raw(i), "conflict",
                     f"{key} appears {where} with other values: {'; '.join(diffs)}")


def _local(us: int, zone: ZoneInfo) -> str:
    moment = datetime(1970, 1, 1, tzinfo=UTC) + timedelta(microseconds=us)
    return moment.astimezone(zone).isoformat(sep=" ")


class _DayTotals:
    """Day statistics of the stored rows, merged across chunks."""

    def __init__(self, dim: int):
        self.dim = dim
        self.parts: dict[np.datetime64, Moments] = {}

    def add(self, chunk: DayMoments) -> None:
        for i, day in enumerate(chunk.days):
            part = chunk.day(i)
            self.parts[day] = self.parts[day].merge(part) if day in self.parts else part

    def days(self) -> list[date]:
        return [cast(date, d.item()) for d in sorted(self.parts)]  # datetime64[D] -> date

    def moments(self) -> DayMoments:
        order = sorted(self.parts)
        return DayMoments.stack(np.array(order, dtype="datetime64[D]"),
                                [self.parts[d] for d in order], self.dim)
