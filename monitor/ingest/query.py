"""An SQL query against another database as a source of rows; a row's "line" is its number in
the result (1-based). The content hash covers the rows as fetched, so running the same query over
unchanged data is recognised as already ingested."""

from __future__ import annotations

import hashlib
import time
from collections.abc import Iterator, Mapping, Sequence
from typing import Any

import numpy as np
import pyarrow as pa
from numpy.typing import NDArray
from sqlalchemy import Connection, text
from sqlalchemy.exc import SQLAlchemyError

from monitor.errors import InputError, MissingColumnsError
from monitor.ingest.readers import RawChunk, Source
from monitor.store.engine import describe_url, driver_connection, open_engine

SQLITE_PROGRESS_STEPS = 10_000  # virtual machine steps between two looks at the clock
_PG_QUERY_CANCELED = "57014"  # SQLSTATE query_canceled (statement_timeout)


class QuerySource(Source):
    kind = "sql"
    unit = "rows"
    record_repeats = False  # a poll that finds nothing new leaves no batch behind

    def __init__(self, url: str, query: str, params: Mapping[str, Any], columns: Sequence[str],
                 chunk_rows: int, id_column: str | None = None, timeout_seconds: float = 300.0):
        self.url = url
        self.query = query
        self.params = dict(params)
        self.columns = list(columns)
        self.id_column = id_column
        self.chunk_rows = max(1, int(chunk_rows))
        self.timeout_seconds = timeout_seconds
        where = describe_url(url)
        self.label = f"query on {where}"
        self.location = f"sql: {where}: {' '.join(query.split())}"
        self._digest = hashlib.sha256()
        self._done = False

    def content_hash(self) -> str | None:
        return self._digest.hexdigest() if self._done else None

    def chunks(self) -> Iterator[RawChunk]:
        engine = open_engine(self.url, create=False)
        where = describe_url(self.url)
        try:
            with engine.connect() as conn:
                deadline = time.monotonic() + self.timeout_seconds
                _limit_time(conn, self.timeout_seconds, deadline)
                try:
                    result = conn.execution_options(stream_results=True,
                                                    yield_per=self.chunk_rows).execute(
                        text(self.query), self.params)
                    if not result.returns_rows:
                        raise InputError(f"the query on {where} returned no rows to read (is "
                                         "it a SELECT?); the source's query must select the "
                                         f"columns {', '.join(self.columns)}")
                    names = list(result.keys())
                    missing = [c for c in self.columns if c not in names]
                    if missing:
                        raise MissingColumnsError(missing, names, self.label)
                    picks = [names.index(c) for c in self.columns]
                    first = 1
                    for part in result.partitions():
                        yield self._chunk([tuple(row[i] for i in picks) for row in part], first)
                        first += len(part)
                except SQLAlchemyError as exc:
                    raise self._failed(exc, deadline) from exc
            self._done = True
        finally:
            engine.dispose()

    def _failed(self, exc: SQLAlchemyError, deadline: float) -> InputError:
        cause = getattr(exc, "orig", None) or exc
        where = describe_url(self.url)
        if (getattr(cause, "sqlstate", None) == _PG_QUERY_CANCELED
                or time.monotonic() >= deadline):
            return InputError(f"the query on {where} took longer than "
                              f"{self.timeout_seconds:g} s and was cancelled (raise the "
                              "source's timeout_seconds if it needs longer)")
        return InputError(f"the query on {where} failed: "
                          f"{str(cause).strip().splitlines()[0]}")

    def _chunk(self, rows: list[tuple[Any, ...]], first: int) -> RawChunk:
        texts = [", ".join(f"{c}={v}" for c, v in zip(self.columns, row, strict=True))
                 for row in rows]
        for line in texts:
            self._digest.update(line.encode("utf-8", "replace") + b"\n")
        values = list(zip(*rows, strict=True)) if rows else [() for _ in self.columns]
        columns = {c: _array(list(v))
                   for c, v in zip(self.columns, values, strict=True)}
        lines = np.arange(first, first + len(rows), dtype=np.int64)

        def raw(picked: NDArray[np.intp]) -> list[str]:
            return [texts[i] for i in picked]

        return RawChunk(columns, lines, raw, (), len(rows))


def _limit_time(conn: Connection, seconds: float, deadline: float) -> None:
    """Cancel the query after ``seconds``: PostgreSQL's statement_timeout, or an SQLite
    progress handler that interrupts the statement once the deadline has passed."""
    if conn.dialect.name == "postgresql":
        conn.exec_driver_sql(f"SET statement_timeout = {max(1, int(seconds * 1000))}")
    elif conn.dialect.name == "sqlite":
        driver_connection(conn).set_progress_handler(
            lambda: int(time.monotonic() >= deadline), SQLITE_PROGRESS_STEPS)


def _array(values: list[Any]) -> pa.Array:
    """An Arrow array of the values; mixed or odd types become text and are judged as text."""
    try:
        return pa.array(values)
    except (pa.ArrowException, TypeError, ValueError):
        return pa.array([None if v is None else str(v) for v in values], pa.string())
