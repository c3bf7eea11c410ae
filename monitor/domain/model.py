"""Models: a named mapping of input columns (response, predictors, time, optional id)."""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime

from monitor.config import MAX_PREDICTORS, Settings
from monitor.errors import ConfigError, InputError

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


def check_model_section(settings: Settings, model: ModelSpec) -> None:
    """Refuse a ``[models.NAME]`` section that names columns the model does not have.

    A range or unit under a misspelt column is otherwise silently ignored (and rows the range
    should have refused are stored), so the error names the section, the file and the columns
    that exist.
    """
    own = settings.models.get(model.name)
    if own is None:
        return
    columns = (*model.predictors, model.response)
    for key, given, allowed in (("ranges", own.ranges, columns),
                                ("words.x_units", own.words.x_units, model.predictors)):
        unknown = [c for c in given if c not in allowed]
        if unknown:
            raise ConfigError(
                f"[models.{model.name}.{key}] names {', '.join(repr(c) for c in unknown)}, "
                f"which model '{model.name}' does not have; its columns are "
                f"{', '.join(allowed)}", source=settings.source)


def unknown_sections(settings: Settings, names: Iterable[str], *,
                     creating: str | None = None) -> ConfigError | None:
    """The error for ``[models.NAME]`` sections naming none of the models ``names`` (None: all
    sections name one). ``creating`` is a model a command is about to create: its section may
    come first."""
    known = set(names)
    unknown = sorted(set(settings.models) - known - {creating})
    if not unknown:
        return None
    listed = ", ".join(sorted(known)) or "none yet"
    return ConfigError(
        f"{', '.join(f'[models.{u}]' for u in unknown)} names no model in the database "
        f"(models: {listed}); fix the name, or add the section once 'fitwatch model fit' "
        "has created the model", source=settings.source)


def check_model_sections(settings: Settings, models: list[ModelRecord]) -> None:
    """Refuse ``[models.NAME]`` sections for models the database does not hold (a misspelt
    name would otherwise leave the real model without its settings), and check the others."""
    error = unknown_sections(settings, (m.name for m in models))
    if error is not None:
        raise error
    for model in models:
        check_model_section(settings, model)
