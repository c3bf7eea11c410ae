"""Arrow arrays to numpy and back through their buffers.

pyarrow's own conversions (``Array.to_numpy``, ``pa.array``, a Python scalar handed to a compute
function) go through its pandas hook, which imports pandas on first use when it is installed:
about 0.4 s, more than parsing and checking 300 000 rows. Ingestion's usual path uses these
functions instead; rarer paths may still use pyarrow's and pay for the import once.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pyarrow as pa
from numpy.typing import NDArray

_NUMPY = {pa.int8(): np.int8, pa.int16(): np.int16, pa.int32(): np.int32, pa.int64(): np.int64,
          pa.uint8(): np.uint8, pa.uint16(): np.uint16, pa.uint32(): np.uint32,
          pa.uint64(): np.uint64, pa.float32(): np.float32, pa.float64(): np.float64,
          pa.date32(): np.int32, pa.date64(): np.int64}


def to_numpy(arr: pa.Array | pa.ChunkedArray, fill: float | bool = 0) -> NDArray[np.generic]:
    """The values of a fixed-width array (numbers, booleans, dates and timestamps as their
    integers) as a new numpy array, nulls replaced by ``fill``."""
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    kind = arr.type
    n, start = len(arr), arr.offset
    buffers = arr.buffers()
    data = buffers[1] if len(buffers) > 1 else None
    if pa.types.is_boolean(kind):
        values: NDArray[np.generic] = (_bits(data, start, n) if data is not None and n
                                       else np.zeros(n, dtype=bool))
    elif pa.types.is_timestamp(kind) or pa.types.is_duration(kind) or kind in _NUMPY:
        dtype = np.dtype(_NUMPY.get(kind, np.int64))
        values = (np.frombuffer(data, dtype=dtype, count=n, offset=start * dtype.itemsize).copy()
                  if data is not None and n else np.zeros(n, dtype=dtype))
    else:  # anything else: pyarrow's conversion (and its pandas hook)
        values = np.array(arr.fill_null(fill).to_numpy(zero_copy_only=False))
    if arr.null_count:
        valid = buffers[0]
        values[~_bits(valid, start, n) if valid is not None else slice(None)] = fill
    return values


def from_numpy(values: NDArray[np.generic], kind: pa.DataType | None = None) -> pa.Array:
    """A numpy array of numbers (or ``datetime64[D]`` days) as an Arrow array without nulls."""
    values = np.ascontiguousarray(values)
    if kind is None:
        kind = pa.date32() if values.dtype == np.dtype("datetime64[D]") else pa.from_numpy_dtype(
            values.dtype)
    if kind == pa.date32():
        values = values.astype("datetime64[D]").astype(np.int32)
    return pa.Array.from_buffers(kind, len(values), [None, pa.py_buffer(values)])


def from_strings(values: Sequence[str] | NDArray[np.object_]) -> pa.Array:
    """Python strings as an Arrow string array (no nulls)."""
    encoded = [str(v).encode("utf-8") for v in values]
    offsets = np.zeros(len(encoded) + 1, dtype=np.int64)
    np.cumsum([len(b) for b in encoded], out=offsets[1:])
    small = offsets[-1] < 2**31
    return pa.Array.from_buffers(pa.string() if small else pa.large_string(), len(encoded),
                                 [None, pa.py_buffer(offsets.astype(np.int32) if small
                                                     else offsets),
                                  pa.py_buffer(b"".join(encoded))])


def _bits(buffer: pa.Buffer, start: int, n: int) -> NDArray[np.bool_]:
    bits = np.frombuffer(buffer, dtype=np.uint8)
    return np.unpackbits(bits, bitorder="little")[start:start + n].astype(bool)
