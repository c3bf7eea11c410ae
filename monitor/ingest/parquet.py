"""Parquet files, read in row batches with pyarrow; a row's "line" is its 1-based row number."""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
from numpy.typing import NDArray

from monitor.errors import InputError, MissingColumnsError
from monitor.ingest.readers import RawChunk, Source, _scan_bytes


class ParquetSource(Source):
    kind = "parquet"
    unit = "rows"

    def __init__(self, path: Path, name: str, columns: Sequence[str], chunk_rows: int,
                 time_column: str | None = None, id_column: str | None = None):
        self.path = path
        self.label = name
        self.location = str(path.resolve())
        self.columns = list(columns)
        self.chunk_rows = max(1, int(chunk_rows))
        self._hash, self.size = _scan_bytes(path, name)
        try:
            self.file = pq.ParquetFile(path)
        except (pa.ArrowException, OSError) as exc:
            raise InputError(f"{name} is not a readable Parquet file: "
                             f"{str(exc).splitlines()[0]}") from exc
        schema = self.file.schema_arrow
        missing = [c for c in columns if c not in schema.names]
        if missing:
            raise MissingColumnsError(missing, schema.names, name)
        for column in columns:
            kind = schema.field(column).type
            if column == time_column:
                ok = pa.types.is_timestamp(kind) or pa.types.is_date(kind) or _texty(kind)
                expected = "timestamps or ISO 8601 text"
            elif column == id_column:
                ok = _texty(kind) or pa.types.is_integer(kind) or pa.types.is_floating(kind)
                expected = "text or integers"
            else:
                ok = (pa.types.is_integer(kind) or pa.types.is_floating(kind)
                      or pa.types.is_decimal(kind) or _texty(kind) or pa.types.is_null(kind))
                expected = "numbers"
            if not ok:
                raise InputError(f"column '{column}' in {name} holds {kind}; expected {expected}")
        self.total = self.file.metadata.num_rows  # 0: a night without rows, not an error

    def content_hash(self) -> str | None:
        return self._hash

    def chunks(self) -> Iterator[RawChunk]:
        first = 1
        try:
            for batch in self.file.iter_batches(batch_size=self.chunk_rows, columns=self.columns):
                yield _chunk(batch, self.columns, first)
                first += batch.num_rows
        except (pa.ArrowException, OSError) as exc:
            raise InputError(f"{self.label}: cannot read row group near row {first}: "
                             f"{str(exc).splitlines()[0]}") from exc


def _texty(kind: pa.DataType) -> bool:
    return pa.types.is_string(kind) or pa.types.is_large_string(kind)


def _chunk(batch: pa.RecordBatch, columns: list[str], first: int) -> RawChunk:
    data = {c: batch.column(c) for c in columns}
    lines = np.arange(first, first + batch.num_rows, dtype=np.int64)

    def texts(rows: NDArray[np.intp]) -> list[str]:
        picked = batch.take(pa.array(np.asarray(rows, dtype=np.int64)))
        values = {c: picked.column(c).to_pylist() for c in columns}
        return [", ".join(f"{c}={values[c][i]}" for c in columns) for i in range(len(rows))]

    return RawChunk(data, lines, texts, (), batch.num_rows)
