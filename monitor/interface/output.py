"""Rendering results for machines (``--json``, ``--csv``): plain values from typed results."""

from __future__ import annotations

import csv
import dataclasses
import io
import json
import math
import sys
from collections.abc import Iterable, Mapping, Sequence
from datetime import date, datetime
from enum import Enum
from pathlib import Path
from typing import Any


def to_jsonable(value: Any) -> Any:
    """Plain JSON values: dates as ISO strings, NaN and infinities as null, arrays as lists."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, Mapping):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple | set | frozenset):
        return [to_jsonable(v) for v in value]
    np = sys.modules.get("numpy")  # a numpy value exists only once numpy is loaded: the
    if np is not None:  # --help and the errors of a mistyped command never load it
        if isinstance(value, np.ndarray):
            return to_jsonable(value.tolist())
        if isinstance(value, np.generic):
            return to_jsonable(value.item())
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, Enum):
        return value.value
    return value


def dumps(value: Any) -> str:
    return json.dumps(to_jsonable(value), indent=2, ensure_ascii=False, allow_nan=False)


def csv_text(columns: Sequence[str], records: Iterable[Mapping[str, Any]]) -> str:
    """Records as CSV with a header row (``--csv``): values as in ``--json`` (dates ISO,
    floats in their shortest exact form), a missing value as an empty cell, a list joined
    with ' | '."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(columns)
    for record in records:
        writer.writerow([_cell(to_jsonable(record.get(c))) for c in columns])
    return out.getvalue()


def _cell(value: Any) -> Any:
    if value is None:
        return ""
    if isinstance(value, list):
        return " | ".join(str(_cell(v)) for v in value)
    return value
