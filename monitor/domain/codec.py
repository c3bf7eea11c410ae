"""Typed values to JSON and back: the one place where domain objects meet JSON columns.

:func:`encode` turns frozen dataclasses (nested), tuples, enums, dates, numpy arrays and
objects with ``to_dict`` into plain JSON values; :func:`decode` rebuilds the typed value from
the annotation of the target, so a field declared ``date | None`` comes back as a ``date`` and a
``tuple[Finding, ...]`` as findings, never as strings and dicts picked apart by hand.

Floats that are not finite are stored as ``null``; a field typed ``float`` reads ``null`` back as
NaN, one typed ``float | None`` as None. Keys of a stored object that the class no longer has
are ignored, and fields the stored object lacks take their defaults, so old rows stay readable.

numpy is not imported here: a value can only be a numpy scalar or array once numpy is loaded, and
an array is decoded only for a type that names one, so the views that decode plain values
(``model show``) run without it.
"""

from __future__ import annotations

import dataclasses
import math
import sys
import types
import typing
from datetime import date, datetime
from enum import Enum
from typing import Any, TypeVar

T = TypeVar("T")
_MISSING = object()


def encode(value: Any) -> Any:
    """A plain JSON value (dicts, lists, str, int, float, bool, None) for ``value``."""
    if value is None or isinstance(value, bool | str | int):
        return value.value if isinstance(value, Enum) else value
    if isinstance(value, Enum):
        return value.value
    if isinstance(value, float):
        return float(value) if math.isfinite(value) else None
    np = sys.modules.get("numpy")  # loaded by whoever made a numpy value
    if np is not None and isinstance(value, np.floating):
        return float(value) if math.isfinite(value) else None
    if np is not None and isinstance(value, np.integer):
        return int(value)
    if isinstance(value, datetime):
        if value.tzinfo is None:
            raise ValueError("naive datetime in typed state; use aware datetimes")
        return value.isoformat()
    if isinstance(value, date):
        return value.isoformat()
    if np is not None and isinstance(value, np.ndarray):
        return encode(value.tolist())
    to_dict = getattr(value, "to_dict", None)
    if callable(to_dict):  # a type with its own stored form (day statistics)
        return to_dict()
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: encode(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): encode(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [encode(v) for v in value]
    raise TypeError(f"cannot store a {type(value).__name__} as JSON")


def decode(kind: Any, data: Any) -> Any:
    """The value of type ``kind`` (a class or an annotation) that :func:`encode` stored."""
    origin = typing.get_origin(kind)
    if origin in (typing.Union, types.UnionType):
        options = [a for a in typing.get_args(kind) if a is not type(None)]
        if data is None:
            if len(options) < len(typing.get_args(kind)):
                return None
            return decode(options[0], None)
        return decode(options[0], data) if len(options) == 1 else _first_fit(options, data)
    if kind is Any:
        return data
    if origin is tuple:
        args = typing.get_args(kind)
        items = [] if data is None else list(data)
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(decode(args[0], v) for v in items)
        return tuple(decode(a, v) for a, v in zip(args, items, strict=True))
    if origin is list:
        (arg,) = typing.get_args(kind) or (Any,)
        return [decode(arg, v) for v in (data or [])]
    if origin in (dict, typing.Mapping) or kind is dict:
        args = typing.get_args(kind)
        value_kind = args[1] if len(args) == 2 else Any
        return {k: decode(value_kind, v) for k, v in (data or {}).items()}
    if _names_an_array(kind, origin):
        return _array(data)
    if kind is float:
        return float("nan") if data is None else float(data)
    if kind is int:
        return int(data)
    if kind is bool:
        return bool(data)
    if kind is str:
        return str(data)
    if isinstance(kind, type) and issubclass(kind, Enum):
        return kind(data)
    if kind is datetime:
        return datetime.fromisoformat(data)
    if kind is date:
        return date.fromisoformat(data)
    from_dict = getattr(kind, "from_dict", None)
    if callable(from_dict):
        return from_dict(data)
    if isinstance(kind, type) and dataclasses.is_dataclass(kind):
        return _dataclass(kind, data)
    raise TypeError(f"cannot read a {kind!r} from JSON")


def _first_fit(options: list[Any], data: Any) -> Any:
    for option in options:
        try:
            return decode(option, data)
        except (TypeError, ValueError, KeyError):
            continue
    raise TypeError(f"no type of {options} reads {data!r}")


def _names_an_array(kind: Any, origin: Any) -> bool:
    np = sys.modules.get("numpy")  # a type naming an array was defined where numpy is loaded
    return np is not None and (origin is np.ndarray or kind is np.ndarray)


def _array(data: Any) -> Any:
    if data is None:
        return None
    import numpy as np

    return np.array(_nan_for_none(data), dtype=np.float64)


def _nan_for_none(data: Any) -> Any:
    if isinstance(data, list):
        return [_nan_for_none(v) for v in data]
    return math.nan if data is None else data


def _dataclass(kind: type[T], data: Any) -> T:
    if not isinstance(data, dict):
        raise TypeError(f"a {kind.__name__} is stored as an object; got {type(data).__name__}")
    hints = _hints(kind)
    values = {}
    for field in dataclasses.fields(kind):  # type: ignore[arg-type]
        if not field.init:
            continue
        raw = data.get(field.name, _MISSING)
        if raw is _MISSING:
            if field.default is dataclasses.MISSING and \
                    field.default_factory is dataclasses.MISSING:
                raise KeyError(f"{kind.__name__}.{field.name} is missing from the stored value")
            continue
        values[field.name] = decode(hints[field.name], raw)
    return kind(**values)


_HINTS: dict[type, dict[str, Any]] = {}  # per class, read once


def _hints(kind: type) -> dict[str, Any]:
    hints = _HINTS.get(kind)
    if hints is None:
        hints = _HINTS[kind] = typing.get_type_hints(kind)
    return hints
