"""Rendering results for people and for machines (``--json``): one place for both."""

from __future__ import annotations

import dataclasses
import json
import math
from collections.abc import Mapping
from datetime import date, datetime
from enum import Enum
from pathlib import Path
from typing import Any

import numpy as np


def to_jsonable(value: Any) -> Any:
    """Plain JSON values: dates as ISO strings, NaN and infinities as null, arrays as lists."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, Mapping):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple | set | frozenset):
        return [to_jsonable(v) for v in value]
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


def fmt(value: float | None, digits: int = 3) -> str:
    """A number for a sentence: significant digits, no trailing noise; '—' when missing."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "—"
    if value == 0:
        return "0"
    magnitude = math.floor(math.log10(abs(value)))
    decimals = max(0, digits - 1 - magnitude)
    return f"{value:,.{decimals}f}"


def fmt_p(p: float | None) -> str:
    """A p-value as people read it: 'p = 0.034', 'p < 0.001'."""
    if p is None or (isinstance(p, float) and not math.isfinite(p)):
        return "p = —"
    if p < 0.001:
        return "p < 0.001"
    return f"p = {p:.3f}"


def percent(value: float | None, decimals: int = 0) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "—"
    return f"{100 * value:.{decimals}f} %"
