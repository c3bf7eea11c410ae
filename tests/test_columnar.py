"""Arrow <-> numpy through buffers gives what pyarrow's own conversions give (the reference),
including nulls, sliced arrays (a non-zero offset), booleans (one bit per value) and dates."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pytest

from monitor.columnar import from_numpy, from_strings, to_numpy

CASES = [
    (pa.array([1.5, None, -2.0, 3.25, None, 7.0]), np.nan),
    (pa.array([1, None, -2, 3, 2**62, None], pa.int64()), 0),
    (pa.array([1, None, -2, 3], pa.int32()), -1),
    (pa.array([True, None, False, True, True, None, False, True, False, True]), False),
    (pc.cast(pa.array(["2026-03-01 08:00", None, "1965-01-01 00:00"]), pa.timestamp("us")), 0),
]


@pytest.mark.parametrize(("arr", "fill"), CASES)
@pytest.mark.parametrize("cut", [slice(None), slice(1, None), slice(2, 5)])
def test_to_numpy_matches_pyarrow(arr: pa.Array, fill: float, cut: slice) -> None:
    part = arr[cut]
    expected = part.fill_null(pa.scalar(fill).cast(part.type)
                               if not pa.types.is_timestamp(part.type)
                               else pa.scalar(fill, pa.int64()).cast(part.type))
    want = expected.to_numpy(zero_copy_only=False)
    if pa.types.is_timestamp(part.type):
        want = want.astype(np.int64)
    got = to_numpy(part, fill)
    np.testing.assert_array_equal(got, want)
    got[...] = got  # writable: a copy, not Arrow's read-only buffer


def test_to_numpy_of_empty_and_all_null_arrays() -> None:
    assert to_numpy(pa.chunked_array([], pa.float64())).shape == (0,)
    assert to_numpy(pa.array([], pa.bool_()), False).dtype == np.dtype(bool)
    np.testing.assert_array_equal(to_numpy(pa.nulls(3, pa.float64()), np.nan), [np.nan] * 3)
    np.testing.assert_array_equal(to_numpy(pa.nulls(3, pa.bool_()), False), [False] * 3)


def test_to_numpy_of_a_chunked_array() -> None:
    chunked = pa.chunked_array([[1.0, 2.0], [None, 4.0]])
    np.testing.assert_array_equal(to_numpy(chunked, -1.0), [1.0, 2.0, -1.0, 4.0])


def test_from_numpy_matches_pyarrow() -> None:
    for values in (np.arange(5, dtype=np.int64), np.linspace(-1, 1, 7),
                   np.arange(3, dtype=np.int32),
                   np.array(["2026-03-01", "1969-12-31"], dtype="datetime64[D]")):
        assert from_numpy(values).equals(pa.array(values))
    strided = np.arange(10, dtype=np.int64)[::3]
    assert from_numpy(strided).to_pylist() == [0, 3, 6, 9]


def test_from_strings_matches_pyarrow() -> None:
    values = ["L1", "", "Ladeort Süd", 'a,"b"\nc', "日本"]
    made = from_strings(values)
    assert made.equals(pa.array(values, pa.string()))
    assert from_strings(np.array(values, dtype=object)).to_pylist() == values
    assert from_strings([]).to_pylist() == []
