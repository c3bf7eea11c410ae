"""A TOML writer for the flat documents ``model export`` writes (the ``model import`` format).

Only what that format holds: top-level keys with strings, booleans, integers, floats and
(nested) lists of them, then tables of such values (``[coefficients]``, ``[ranges]``). Floats
are written with ``repr``, Python's shortest form that reads back as the same float, so a
document read with :mod:`tomllib` gives back exactly the numbers written (TOML 1.0.0,
https://toml.io/en/v1.0.0: basic strings, floats, arrays, tables).
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import Any

_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")
# TOML 1.0.0, "String": the escapes a basic string has short forms for
_SHORT = {"\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r", '"': '\\"',
          "\\": "\\\\"}


def toml_text(doc: Mapping[str, Any]) -> str:
    """``doc`` as TOML: plain values first, then one table per mapping value."""
    lines: list[str] = []
    tables = {k: v for k, v in doc.items() if isinstance(v, Mapping)}
    for key, value in doc.items():
        if key not in tables:
            lines.append(f"{_key(key)} = {_value(value)}")
    for key, table in tables.items():
        lines.append("")
        lines.append(f"[{_key(key)}]")
        for inner, value in table.items():
            if isinstance(value, Mapping):
                raise TypeError(f"toml_text writes one level of tables; {key}.{inner} is a "
                                "table")
            lines.append(f"{_key(inner)} = {_value(value)}")
    return "\n".join(lines) + "\n"


def _key(key: str) -> str:
    return key if _BARE_KEY.fullmatch(key) else _string(key)


def _string(text: str) -> str:
    out = []
    for ch in text:
        if ch in _SHORT:
            out.append(_SHORT[ch])
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:  # other control characters must be escaped
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):  # repr gives 'inf', '-inf' and 'nan' too, as TOML spells them
        return float.__repr__(value)
    if isinstance(value, str):
        return _string(value)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    raise TypeError(f"toml_text cannot write {type(value).__name__} values ({value!r})")
