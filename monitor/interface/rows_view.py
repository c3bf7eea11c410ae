"""``rows``: a day's scored rows, and rejected rows or batches, as text, CSV and JSON.

The CSV and JSON rows are the same records: the model's own columns (time in the configured
zone, id, predictors, response), then the version's planned value, prediction interval,
residual, standardized residual and flags, then the batch that stored the row.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime, timedelta
from typing import Any
from zoneinfo import ZoneInfo

from monitor.config import Wording
from monitor.domain.phrasing import fmt, percent
from monitor.ingest.history import BatchList, Rejections
from monitor.ingest.reasons import REASONS
from monitor.interface.output import csv_text
from monitor.monitoring.day_rows import ScoredDay
from monitor.store.batches import BatchRecord

FIGURES = ("planned", "lower", "upper", "residual", "std_residual", "missed", "extrapolated",
           "batch")
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


# a day's rows -----------------------------------------------------------------------------------
def _data_columns(day: ScoredDay) -> list[tuple[str, str]]:
    """(shown name, source) of the model's columns; a name the figures use gets '_input'."""
    m = day.model
    named = [(m.time_column, "time"), (m.id_column or "key", "key"),
             *((p, f"x{j}") for j, p in enumerate(m.predictors)), (m.response, "y")]
    return [(f"{n}_input" if n in FIGURES else n, source) for n, source in named]


def row_columns(day: ScoredDay) -> list[str]:
    return [name for name, _ in _data_columns(day)] + list(FIGURES)


def row_records(day: ScoredDay, zone: ZoneInfo) -> list[dict[str, Any]]:
    """The shown rows, one record each (the CSV rows and the JSON ``rows``)."""
    rows, s = day.rows, day.scores
    columns = _data_columns(day)
    out = []
    for i in day.shown.nonzero()[0]:
        values: dict[str, Any] = {
            "time": (_EPOCH + timedelta(microseconds=int(rows.observed_us[i]))).astimezone(zone),
            "key": str(rows.keys[i]), "y": float(rows.y[i]),
            **{f"x{j}": float(v) for j, v in enumerate(rows.x[i])}}
        record = {name: values[source] for name, source in columns}
        record.update(planned=float(s.predicted[i]), lower=float(s.lower[i]),
                      upper=float(s.upper[i]), residual=float(rows.y[i] - s.predicted[i]),
                      std_residual=float(s.z[i]), missed=not bool(s.inside[i]),
                      extrapolated=bool(s.extrapolated[i]), batch=int(rows.batch_ids[i]))
        out.append(record)
    return out


def scored_day_csv(day: ScoredDay, zone: ZoneInfo) -> str:
    return csv_text(row_columns(day), row_records(day, zone))


def scored_day_document(day: ScoredDay, zone: ZoneInfo) -> dict[str, Any]:
    """The ``rows --day --json`` document."""
    c = day.check
    return {
        "model": day.model.name, "day": day.day, "version": day.version.number,
        "scored_by": "check" if c is not None else "active", "active_version": day.active,
        "level": day.level, "n": day.scores.n, "missed": day.missed,
        "extrapolated": int(day.scores.extrapolated.sum()),
        "check": None if c is None else {
            "n": c.n, "covered": c.covered, "missed": c.n - c.covered,
            "extrapolated": c.extrapolated, "status": c.status,
            "checked_at": c.checked_at.astimezone(zone),
            "rows_since_check": day.rows_since_check},
        "filters": list(day.only.names), "shown": int(day.shown.sum()),
        "batches": [_batch_record(b, zone) for b in day.batches],
        "columns": row_columns(day),
        "records": row_records(day, zone),
    }


def scored_day_text(day: ScoredDay, words: Wording, zone: ZoneInfo) -> str:
    c, s = day.check, day.scores
    why = ("the version that checked the day" if c is not None
           else "the active version: the day is not checked yet")
    if day.active is not None and day.active != day.version.number:
        why += f" (version {day.active} is active now)"
    lines = [f"{day.model.name} on {day.day}: {s.n} {words.rows if s.n != 1 else words.row}, "
             f"scored by version {day.version.number}, {why}; "
             f"{percent(day.level)} prediction intervals",
             f"  {day.missed} outside their interval (missed), "
             f"{int(s.extrapolated.sum())} outside the fit window's range (extrapolated)"]
    if c is not None:
        checked = c.checked_at.astimezone(zone).strftime("%Y-%m-%d %H:%M")
        lines.append(f"  the check of {checked} counted {c.n - c.covered} of {c.n} outside, "
                     f"{c.extrapolated} extrapolated; status {c.status.upper()}")
        if day.rows_since_check:
            lines.append("  rows arrived after that check: the next 'fitwatch check' scores the "
                         "day again (the rows here are all those stored now)")
    shown = int(day.shown.sum())
    if day.only.names:
        lines.append(f"  showing {shown} of {s.n} ({', '.join(day.only.names)})")
    if shown:
        data = [name for name, _ in _data_columns(day)]
        headers = [*data, "planned", "lower", "upper", "residual", "std resid", "flags"]
        body = []
        for r in row_records(day, zone):
            flags = [f for f in ("missed", "extrapolated") if r[f]]
            body.append([r[data[0]].strftime("%H:%M:%S"), *(_cell(r[col]) for col in data[1:]),
                         fmt(r["planned"], 4), fmt(r["lower"], 4), fmt(r["upper"], 4),
                         _signed(r["residual"]), f"{r['std_residual']:+.2f}",
                         ", ".join(flags)])
        lines.extend("  " + line for line in _table(headers, body, first_left=2,
                                                    last_left=True))
    for b in day.batches:
        note = (f"; see 'fitwatch rows {day.model.name} --rejected --batch {b.id}'"
                if b.rejected else "")
        lines.append(f"  rows from batch {b.id} ({b.source}), which rejected {b.rejected} "
                     f"row(s){note}")
    return "\n".join(lines)


# rejected rows and batches ----------------------------------------------------------------------
REJECTED_COLUMNS = ("batch", "source", "line", "reason", "detail", "raw")
BATCH_COLUMNS = ("batch", "ingested_at", "source", "status", "read", "accepted", "duplicates",
                 "rejected", "first_day", "last_day")


def rejected_records(found: Rejections) -> list[dict[str, Any]]:
    return [{"batch": b.batch.id, "source": b.batch.source, "line": r.line,
             "reason": r.reason, "detail": r.detail, "raw": r.raw}
            for b in found.batches for r in b.rows]


def rejections_document(found: Rejections, zone: ZoneInfo) -> dict[str, Any]:
    return {"model": found.model.name, "batch": found.batch_id,
            "ingest_day": found.ingest_day,
            "batches": [_batch_record(b.batch, zone) for b in found.batches],
            "rejected": found.count, "records": rejected_records(found)}


def rejections_csv(found: Rejections) -> str:
    return csv_text(REJECTED_COLUMNS, rejected_records(found))


def rejections_text(found: Rejections, zone: ZoneInfo) -> str:
    name = found.model.name
    if not found.batches:
        return (f"{name}: no file or query was ingested on {found.ingest_day} "
                f"({zone.key}); list the batches with 'fitwatch rows {name} --rejected'")
    lines = []
    for b in found.batches:
        lines.append(f"{name}, batch {b.batch.id} ({b.batch.source}, ingested "
                     f"{_local(b.batch, zone)}): {b.batch.read} read, {b.batch.accepted} "
                     f"stored, {b.batch.duplicates} duplicate(s), {b.batch.rejected} rejected")
        if b.batch.rejected > len(b.rows):
            lines.append(f"  {b.batch.rejected - len(b.rows)} good row(s) went with the whole "
                         "file (--strict); the rows that caused it:")
        for r in b.rows:
            lines.append(f"  line {r.line}: {REASONS.get(r.reason, r.reason)}: {r.detail}")
            lines.append(f"    {r.raw}")
    return "\n".join(lines)


def batch_records(listed: BatchList, zone: ZoneInfo) -> list[dict[str, Any]]:
    return [_batch_record(b, zone) for b in listed.batches]


def batches_csv(listed: BatchList, zone: ZoneInfo) -> str:
    return csv_text(BATCH_COLUMNS, batch_records(listed, zone))


def batches_document(listed: BatchList, zone: ZoneInfo) -> dict[str, Any]:
    return {"model": listed.model.name, "batches": batch_records(listed, zone)}


def batches_text(listed: BatchList, zone: ZoneInfo) -> str:
    name = listed.model.name
    if not listed.batches:
        return f"{name}: nothing ingested yet"
    headers = ["batch", "ingested", "source", "read", "stored", "dupl.", "rejected", "days"]
    body = []
    for b in listed.batches:
        days = (f"{b.first_day} .. {b.last_day}" if b.first_day and b.first_day != b.last_day
                else str(b.first_day or "—"))
        body.append([str(b.id), _local(b, zone), b.source, str(b.read), str(b.accepted),
                     str(b.duplicates), f"{b.rejected}" + (" (whole file)"
                                                           if b.status == "rejected" else ""),
                     days])
    lines = [f"{name}: {len(listed.batches)} batch(es); rejected rows of one: "
             f"'fitwatch rows {name} --rejected --batch N'"]
    lines.extend("  " + line for line in _table(headers, body, first_left=3, last_left=True))
    return "\n".join(lines)


# helpers ----------------------------------------------------------------------------------------
def _batch_record(b: BatchRecord, zone: ZoneInfo) -> dict[str, Any]:
    return {"batch": b.id, "ingested_at": b.started_at.astimezone(zone), "source": b.source,
            "status": b.status, "read": b.read, "accepted": b.accepted,
            "duplicates": b.duplicates, "rejected": b.rejected, "first_day": b.first_day,
            "last_day": b.last_day}


def _local(b: BatchRecord, zone: ZoneInfo) -> str:
    return b.started_at.astimezone(zone).strftime("%Y-%m-%d %H:%M")


def _cell(value: Any) -> str:
    """A stored value as it was written: 22.0 as '22', 71.2 as '71.2'."""
    return f"{value:.10g}" if isinstance(value, float) else str(value)


def _signed(value: float) -> str:
    text = fmt(value, 3)
    return text if text.startswith("-") or value == 0 else "+" + text


def _table(headers: Sequence[str], body: Sequence[Sequence[str]], *, first_left: int,
           last_left: bool = False) -> list[str]:
    """Columns padded to their widest cell: the first ``first_left`` (and the last, with
    ``last_left``) left-aligned, the others right-aligned."""
    widths = [max(len(h), *(len(r[j]) for r in body)) for j, h in enumerate(headers)]
    last = len(headers) - 1

    def line(cells: Sequence[str]) -> str:
        return "  ".join(c.ljust(w) if j < first_left or (last_left and j == last)
                         else c.rjust(w) for j, (c, w) in enumerate(zip(cells, widths,
                                                                       strict=True))).rstrip()
    return [line(headers), *(line(r) for r in body)]
