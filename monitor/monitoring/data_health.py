"""Finding a model's data health in the database: a silent feed, bad files, rising rejections.

The statistics are in ``monitor.stats.silence`` and ``monitor.stats.rejection_rise``; the values
in ``monitor.domain.data_health``. What counts, as of a day ``through`` (the last checked day, or
the night of a digest) and an instant ``now``:

- **a silent feed**: the days after the latest day with rows, through ``through``, judged against
  the weekday calendar of the version's fit window; a fit window under :data:`MIN_CALENDAR_DAYS`
  uses the model's stored days with rows up to the pause instead, and an imported version, whose
  window is not in the database, its own days from its first active day (either up to half a
  year). A calendar still under :data:`MIN_CALENDAR_DAYS` is stretched back to that many days,
  the earlier ones counted as days without rows: that can only make a pause more plausible, so
  the flag errs on the side of silence;
- **bad files**: files and SQL source runs ingested in the :data:`RECENT_DAYS` before ``now``
  that were rejected whole, or with more than ``check.rejected_file_share`` of their rows bad,
  unless a later one of the same name was stored cleanly;
- **rising rejections**: the other batches of those days against the year before them.

A few small queries per model (the batches of a year are one row per file); nothing reads rows.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from zoneinfo import ZoneInfo

from sqlalchemy import Connection, Engine

from monitor.config import CheckSettings, Settings
from monitor.domain.data_health import (
    BadFile,
    DataHealth,
    ReasonCount,
    RejectedExample,
    RisingRejections,
    SilentFeed,
    mostly_rejected,
)
from monitor.domain.model import ModelRecord
from monitor.domain.version_state import DatedVersion
from monitor.ingest.reasons import REASONS, ranked
from monitor.stats.rejection_rise import rejection_rise
from monitor.stats.silence import WeekdayCalendar, silent_run
from monitor.store.access import database
from monitor.store.batches import (
    BatchRecord,
    batches_between,
    batches_between_for,
    first_rejected_row,
)
from monitor.store.models import get_model, list_models
from monitor.store.row_days import (
    days_with_rows,
    first_day_with_rows,
    last_day_with_rows,
    last_days_with_rows,
)
from monitor.store.standing import active_head, last_status

RECENT_DAYS = 7  # bad files are shown this long; the recent window of the rejection share
LONG_RUN_DAYS = 365  # the long run the recent rejection share is compared with
OWN_CALENDAR_DAYS = 182  # an imported version's calendar: at most this many of its own days
MIN_CALENDAR_DAYS = 14  # a shorter calendar says too little about a week: stretched to this
REASONS_SHOWN = 3
STRICT_ONLY = "file_rejected"  # rows rejected only because a --strict file was


@dataclass(frozen=True)
class Prefetched:
    """What the data findings of many models as of one ``through`` and ``now`` read first, for
    all of them at once (a night's digest covers every model): the latest day with rows and
    the batches of the last :data:`RECENT_DAYS`."""

    through: date
    now: datetime
    last_rows: Mapping[int, date]
    recent: Mapping[int, Sequence[BatchRecord]]


def prefetch(conn: Connection, model_ids: Iterable[int], *, through: date,
             now: datetime) -> Prefetched:
    ids = list(model_ids)
    return Prefetched(through, now, last_days_with_rows(conn, ids, through),
                      batches_between_for(conn, ids, now - timedelta(days=RECENT_DAYS), now))


def model_data_health(conn: Connection, model: ModelRecord, check: CheckSettings,
                      version: DatedVersion | None, *, through: date | None, now: datetime,
                      zone: ZoneInfo, prefetched: Prefetched | None = None) -> DataHealth:
    """The data findings of ``model`` as of the day ``through`` and the instant ``now``
    (``prefetched``: read before for these same ``through`` and ``now``)."""
    if prefetched is not None and (prefetched.through, prefetched.now) != (through, now):
        raise ValueError("data read for another day or instant")
    silent = None
    if version is not None and through is not None:
        last_rows = (prefetched.last_rows.get(model.id) if prefetched is not None
                     else last_day_with_rows(conn, model, through))
        silent = _silent_feed(conn, model, check, version, through, last_rows)
    recent = (list(prefetched.recent.get(model.id, ())) if prefetched is not None
              else batches_between(conn, model.id, now - timedelta(days=RECENT_DAYS), now))
    bad = [b for b in recent if _is_bad(b, check)]
    bad_ids = {b.id for b in bad}
    others = [b for b in recent if b.id not in bad_ids]
    rising = None
    if any(_bad_rows(b) > 0 for b in others):  # no rejected row recently: nothing can rise
        past = batches_between(conn, model.id, now - timedelta(days=LONG_RUN_DAYS),
                               now - timedelta(days=RECENT_DAYS))
        rising = _rising(conn, others, [b for b in past if not _is_bad(b, check)], check)
    standing = [b for b in bad if not _corrected(b, recent, check)]
    return DataHealth(model.name, silent, tuple(_bad_file(conn, b, zone) for b in standing),
                      rising)


def data_health(settings: Settings, names: Sequence[str] | None = None, *,
                now: datetime | None = None, engine: Engine | None = None) -> list[DataHealth]:
    """Every (or the named) model's data findings now, through its last checked day."""
    now = now or datetime.now(UTC)
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        models = [get_model(conn, n) for n in names] if names else list_models(conn)
        out = []
        for model in models:
            last = last_status(conn, model.id)
            out.append(model_data_health(
                conn, model, settings.for_model(model.name).check,
                active_head(conn, model.id), through=last.day if last else None, now=now,
                zone=settings.timezone))
    return out


# a silent feed ----------------------------------------------------------------------------------
def _silent_feed(conn: Connection, model: ModelRecord, check: CheckSettings,
                 version: DatedVersion, through: date, last_rows: date | None
                 ) -> SilentFeed | None:
    first = last_rows + timedelta(days=1) if last_rows else version.active_from
    if first is None or first > through:
        return None
    found = _calendar(conn, model, version, last_rows)
    if found is None:
        return None
    calendar, described = found
    run = silent_run(calendar, first, through, check.silence_pvalue)
    if run.flagged_on is None:
        return None
    return SilentFeed(last_rows, first, through, run.days, run.expected_days, run.chance,
                      run.level, run.flagged_on, described)


def _calendar(conn: Connection, model: ModelRecord, version: DatedVersion,
              last_rows: date | None) -> tuple[WeekdayCalendar, str] | None:
    """The weekday calendar the version's days are judged by, and how to name it."""
    fitted = version.fit_start is not None and version.fit_end is not None
    if (version.fit_start is not None and version.fit_end is not None
            and (version.fit_end - version.fit_start).days + 1 >= MIN_CALENDAR_DAYS):
        first, last = version.fit_start, version.fit_end
        described = f"the fit window ({first} to {last})"
    elif last_rows is None:
        return None
    elif fitted:  # a short fit window: the model's stored days up to the pause
        stored = first_day_with_rows(conn, model) or last_rows
        first = max(stored, last_rows - timedelta(days=OWN_CALENDAR_DAYS - 1))
        last = last_rows
        described = f"the model's days with rows ({first} to {last})"
    elif version.active_from is not None:
        first = max(version.active_from, last_rows - timedelta(days=OWN_CALENDAR_DAYS - 1))
        last = last_rows
        described = f"version {version.number}'s days so far ({first} to {last})"
    else:
        return None
    if (last - first).days + 1 < MIN_CALENDAR_DAYS:
        # Too few days to say much about a week: stretch the calendar back, counting the days
        # before them as days without rows. A weekday's chance of a silent day can only rise,
        # so the chance of a pause is overstated, never understated.
        first = last - timedelta(days=MIN_CALENDAR_DAYS - 1)
        described += (f", stretched to {MIN_CALENDAR_DAYS} days from {first}, the earlier "
                      "ones counted as days without rows")
    return WeekdayCalendar.of(first, last, days_with_rows(conn, model, first, last)), described


# bad files --------------------------------------------------------------------------------------
def _bad_rows(batch: BatchRecord) -> int:
    return batch.rejected - batch.reasons.get(STRICT_ONLY, 0)


def _is_bad(batch: BatchRecord, check: CheckSettings) -> bool:
    return batch.status == "rejected" or mostly_rejected(_bad_rows(batch), batch.read,
                                                         check.rejected_file_share)


def _corrected(batch: BatchRecord, recent: Iterable[BatchRecord], check: CheckSettings) -> bool:
    """Whether a later batch of the same name was stored cleanly (the file was fixed)."""
    return any(b.id > batch.id and b.source == batch.source and not _is_bad(b, check)
               for b in recent)


def _ranked(reasons: Counter[str]) -> tuple[ReasonCount, ...]:
    return tuple(ReasonCount(code, REASONS.get(code, code), n)
                 for code, n in ranked(reasons)[:REASONS_SHOWN])


def _example(conn: Connection, batch_ids: Sequence[int],
             reasons: tuple[ReasonCount, ...]) -> RejectedExample | None:
    if not reasons:
        return None
    found = first_rejected_row(conn, batch_ids, reasons[0].code)
    if found is None:
        return None
    _, row = found
    return RejectedExample(row.line, row.raw, row.detail)


def _bad_file(conn: Connection, batch: BatchRecord, zone: ZoneInfo) -> BadFile:
    reasons = _ranked(Counter(batch.reasons))
    return BadFile(batch.id, batch.source, batch.started_at.astimezone(zone), batch.read,
                   _bad_rows(batch), batch.status == "rejected", reasons,
                   _example(conn, [batch.id], reasons))


# rising rejections ------------------------------------------------------------------------------
def _rising(conn: Connection, recent: Sequence[BatchRecord], past: Sequence[BatchRecord],
            check: CheckSettings) -> RisingRejections | None:
    bad, read = sum(_bad_rows(b) for b in recent), sum(b.read for b in recent)
    past_bad, past_read = sum(_bad_rows(b) for b in past), sum(b.read for b in past)
    rise = rejection_rise(bad, read, past_bad, past_read, check.rejection_pvalue)
    if rise is None or not rise.rising:
        return None
    counts: Counter[str] = Counter()
    for b in recent:
        counts.update(b.reasons)
    reasons = _ranked(counts)
    return RisingRejections(RECENT_DAYS, bad, read, past_bad, past_read, rise.past_share,
                            rise.pvalue, reasons,
                            _example(conn, [b.id for b in recent if b.rejected], reasons))
