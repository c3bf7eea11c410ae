"""Models: a named mapping of input columns (response, predictors, time, optional id)."""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import datetime

from monitor.config import MAX_PREDICTORS
from monitor.errors import InputError

NAME_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,99}")
_COLUMN_LIMIT = 200


@dataclass(frozen=True)
class ModelSpec:
    """Which input columns a model reads."""

    name: str
    response: str
    predictors: tuple[str, ...]
    time_column: str
    id_column: str | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "predictors", tuple(self.predictors))
        if not NAME_PATTERN.fullmatch(self.name or "") or self.name.endswith("."):
            raise InputError(f"model name {self.name!r} is not allowed; use 1 to 100 letters, "
                             "digits, '_', '-' or '.', starting with a letter or digit")
        if not 1 <= len(self.predictors) <= MAX_PREDICTORS:
            raise InputError(f"model {self.name} needs 1 to {MAX_PREDICTORS} predictor columns; "
                             f"got {len(self.predictors)}")
        for column in self.columns:
            if not column.strip() or len(column) > _COLUMN_LIMIT or column != column.strip():
                raise InputError(f"column name {column!r} of model {self.name} is empty, longer "
                                 f"than {_COLUMN_LIMIT} characters or has surrounding spaces")
        seen: set[str] = set()
        for column in self.columns:
            if column in seen:
                raise InputError(f"column '{column}' is used twice in model {self.name}; the "
                                 "response, predictors, time and id columns must differ")
            seen.add(column)

    @property
    def columns(self) -> tuple[str, ...]:
        """Every column the model reads: predictors, response, time, then id (if any)."""
        extra = (self.id_column,) if self.id_column else ()
        return (*self.predictors, self.response, self.time_column, *extra)

    @property
    def k(self) -> int:
        return len(self.predictors)


@dataclass(frozen=True, kw_only=True)
class ModelRecord(ModelSpec):
    """A stored model."""

    id: int
    created_at: datetime

    @property
    def spec(self) -> ModelSpec:
        return ModelSpec(self.name, self.response, self.predictors, self.time_column,
                         self.id_column)
