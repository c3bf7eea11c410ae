"""The TOML writer of ``model export``: what it writes, Python's own TOML reader (tomllib,
TOML 1.0.0) reads back unchanged, floats bit for bit."""

from __future__ import annotations

import math
import tomllib
from typing import Any

import pytest
from hypothesis import given
from hypothesis import strategies as st

from monitor.lifecycle.toml_text import toml_text

_keys = st.text(min_size=1, max_size=8)
_floats = st.floats(allow_nan=False)
_scalars = st.one_of(st.text(max_size=12), st.booleans(), st.integers(-2**63, 2**63 - 1),
                     _floats)
_values = st.one_of(_scalars, st.lists(_floats, max_size=3),
                    st.lists(st.lists(_floats, max_size=3), max_size=3),
                    st.lists(st.text(max_size=5), max_size=3))
_documents = st.dictionaries(
    _keys, st.one_of(_values, st.dictionaries(_keys, st.one_of(_scalars,
                                                               st.lists(_floats, max_size=2)),
                                              max_size=3)),
    max_size=6)


@given(_documents)
def test_reads_back_as_written(doc: dict[str, Any]) -> None:
    assert tomllib.loads(toml_text(doc)) == doc


def test_the_export_document_keeps_every_float_exactly() -> None:
    doc = {"response": 'load "minutes"\\x', "predictors": ["pallets", "weight kg"],
           "s": 0.1 + 0.2, "dof": 3871, "covariance": [[1e-300, -5e-324], [2.0**60, 1 / 3]],
           "coefficients": {"intercept": 8.553, "weight kg": -0.0001},
           "ranges": {"pallets": [4.0, 33.0]}, "note": "line\nbreak\ttab\x7f\x00"}
    text = toml_text(doc)
    back = tomllib.loads(text)
    assert back == doc
    assert back["s"] == 0.30000000000000004 and back["covariance"][0][1] == -5e-324
    # plain keys first, then one table per mapping
    assert text.index("note =") < text.index("[coefficients]") < text.index("[ranges]")
    assert '"weight kg" = -0.0001' in text


def test_non_finite_floats_in_toml_spelling() -> None:
    back = tomllib.loads(toml_text({"a": math.inf, "b": -math.inf, "c": math.nan}))
    assert back["a"] == math.inf and back["b"] == -math.inf and math.isnan(back["c"])


def test_refuses_what_the_format_does_not_hold() -> None:
    with pytest.raises(TypeError, match="one level of tables"):
        toml_text({"a": {"b": {"c": 1}}})
    with pytest.raises(TypeError, match="cannot write"):
        toml_text({"a": None})
