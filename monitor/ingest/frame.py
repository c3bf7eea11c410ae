"""Reading a file's valid rows into memory without storing them (for replay).

The same readers and the same row validation as ingestion; duplicates within the file are
resolved the same way (the first row with a key wins; a later one with equal values is a
duplicate, with other values a conflict).
"""

from __future__ import annotations

import os
from collections import Counter
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from monitor.domain.model import ModelSpec
from monitor.ingest.readers import open_file
from monitor.ingest.service import IngestOptions
from monitor.ingest.validate import Rules, check_rows


@dataclass(frozen=True, eq=False)
class FileRows:
    """A file's valid, distinct rows (sorted by time) and the count of everything else."""

    source: str
    days: NDArray[np.datetime64]
    observed_us: NDArray[np.int64]
    x: NDArray[np.float64]
    y: NDArray[np.float64]
    read: int
    duplicates: int
    rejected: int
    reasons: Mapping[str, int]

    @property
    def accepted(self) -> int:
        return len(self.y)


def read_rows(path: str | os.PathLike[str], spec: ModelSpec, options: IngestOptions) -> FileRows:
    source = open_file(path, spec.columns, options.chunk_rows, time_column=spec.time_column,
                       id_column=spec.id_column)
    rules = Rules(options.timezone, options.ranges, options.now, options.future_tolerance,
                  options.earliest_day)
    parts = [check_rows(chunk, spec, rules) for chunk in source.chunks()]
    reasons = Counter(r.reason for p in parts for r in p.rejected)
    read = sum(p.read for p in parts)
    keys = np.concatenate([p.keys for p in parts]) if parts else np.zeros(0, object)
    us = np.concatenate([p.observed_us for p in parts]) if parts else np.zeros(0, np.int64)
    days = (np.concatenate([p.days for p in parts]) if parts
            else np.zeros(0, "datetime64[D]"))
    x = np.concatenate([p.x for p in parts]) if parts else np.zeros((0, spec.k))
    y = np.concatenate([p.y for p in parts]) if parts else np.zeros(0)
    frame = pd.DataFrame(np.column_stack([us, x, y]) if len(y) else np.zeros((0, spec.k + 2)))
    frame.insert(0, "key", keys)
    repeat = frame.duplicated("key", keep="first").to_numpy()
    first_values = frame.groupby("key", sort=False).transform("first")
    same = (frame.drop(columns="key") == first_values).all(axis=1).to_numpy()
    duplicates = int((repeat & same).sum())
    conflicts = int((repeat & ~same).sum())
    if conflicts:
        reasons["conflict"] += conflicts
    keep = ~repeat
    order = np.argsort(us[keep], kind="stable")
    return FileRows(str(path), days[keep][order], us[keep][order], x[keep][order],
                    y[keep][order], read, duplicates, sum(reasons.values()), dict(reasons))
