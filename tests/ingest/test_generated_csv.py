"""Hypothesis-generated CSV files, valid and broken in every way we could think of: each run
either ends in a balanced summary that the database agrees with, or in a one-line InputError."""

from __future__ import annotations

import csv
import io
import itertools
from datetime import UTC, datetime

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from monitor.domain.model import ModelSpec
from monitor.errors import InputError
from monitor.ingest.service import ingest_file, options_for
from monitor.store.models import create_model
from monitor.store.row_days import count_observations
from monitor.store.schema import rejected_rows
from tests.support.ingest import HEADER, NOW

_names = itertools.count()

ids = st.one_of(st.sampled_from(["A1", "A2", "A3", " A1 ", "a1"]), st.text(max_size=6),
                st.just("x" * 210))
times = st.one_of(
    st.datetimes(min_value=datetime(2026, 3, 27), max_value=datetime(2026, 4, 2)).map(
        lambda d: d.isoformat(sep=" ")),
    st.datetimes(min_value=datetime(2026, 3, 27), max_value=datetime(2026, 4, 2)).map(
        lambda d: d.isoformat(timespec="minutes")),
    st.datetimes(min_value=datetime(2026, 3, 27), max_value=datetime(2026, 4, 2),
                 timezones=st.sampled_from([UTC])).map(lambda d: d.isoformat()),
    st.sampled_from(["2026-03-29 02:30", "2026-10-25 02:30", "2030-01-01 00:00", "",
                     "14/03/2026", "2026-02-30 10:00", "now"]),
    st.text(max_size=8))
numbers = st.one_of(
    st.floats(min_value=-10, max_value=100, allow_nan=False).map(repr),
    st.integers(0, 70).map(str),
    st.sampled_from(["", "nan", "inf", "-inf", "1e999", " 5 ", "1,5", "abc", "0x10", "+3",
                     ".5", "5.", "-0"]),
    st.text(max_size=5))
doors = st.one_of(st.text(max_size=10),
                 st.sampled_from(['D1', 'a "quoted" door', "x,y", "\n", "a\rb", "\r"]))


@st.composite
def csv_files(draw: st.DrawFn) -> tuple[bytes, int]:
    """CSV bytes and the number of non-blank records after the header."""
    rows = draw(st.lists(st.tuples(ids, times, numbers, numbers, doors), max_size=25))
    quoted = draw(st.booleans())
    newline = draw(st.sampled_from(["\n", "\r\n"]))
    out = io.StringIO()
    if quoted:
        writer = csv.writer(out, lineterminator=newline)
        writer.writerow(HEADER.split(","))
        for row in rows:
            extra = draw(st.sampled_from([(), ("spare",)]))
            writer.writerow((*row, *extra) if draw(st.integers(0, 9)) else row[:3])
    else:
        out.write(HEADER + newline)
        for row in rows:
            out.write(",".join(row) + newline)
            if draw(st.integers(0, 9)) == 0:
                out.write(newline)  # a blank line
    text = out.getvalue()
    if draw(st.booleans()):
        text = "\ufeff" + text
    data = text.encode("utf-8", "surrogatepass")
    count = sum(1 for record in csv.reader(io.StringIO(text.removeprefix("\ufeff"),
                                                       newline=""))
                if record) - 1
    return data, count


def _ends_inside_quotes(text: str) -> bool:
    """Whether a quote is never closed: the csv module then makes the rest of the file one
    field, while the reader rejects the row where it opened and reads the lines after it as
    rows ("bad_quoting", the readers' module text), so the two counts differ by design."""
    try:
        for _ in csv.reader(io.StringIO(text.removeprefix("\ufeff"), newline=""), strict=True):
            pass
    except csv.Error as exc:
        return "unexpected end of data" in str(exc)
    return False


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(data=csv_files(), with_id=st.booleans(), chunk_rows=st.sampled_from([1, 3, 1000]))
def test_generated_files_always_balance(engine, make_settings, tmp_path, data, with_id,
                                        chunk_rows) -> None:
    content, records = data
    name = f"m{next(_names)}"
    spec = ModelSpec(name, "load_minutes", ("pallets",), "docked_at",
                     "load_id" if with_id else None)
    with engine.begin() as conn:
        model = create_model(conn, spec, NOW)
    path = tmp_path / f"{name}.csv"
    path.write_bytes(content)
    settings_ = make_settings("sqlite://", models={name: {"ranges": {"pallets": [0, 60]}}})
    options = options_for(settings_, name, now=NOW)
    options = type(options)(**{**options.__dict__, "chunk_rows": chunk_rows})
    try:
        summary = ingest_file(engine, model, path, options)
    except InputError as exc:
        assert "\n" not in str(exc)
        assert records <= 0 or "\x00" in content.decode("utf-8", "replace")
        return
    assert summary.read == summary.accepted + summary.duplicates + summary.rejected
    assert sum(summary.reasons.values()) == summary.rejected
    text = content.decode("utf-8", "replace")
    if "\r" not in text.replace("\r\n", "") and not _ends_inside_quotes(text):
        assert summary.read == records  # every record counted once, blank lines not at all
    with engine.connect() as conn:
        assert count_observations(conn, model) == summary.accepted
        stored_rejections = conn.execute(
            select(func.count()).select_from(rejected_rows)
            .where(rejected_rows.c.batch_id == summary.batch_id)).scalar_one()
    assert stored_rejections == summary.rejected
    again = ingest_file(engine, model, path, options)
    assert again.already_ingested and again.read == summary.read
    assert again.accepted == 0 and again.rejected == summary.rejected
    assert again.duplicates == summary.accepted + summary.duplicates
