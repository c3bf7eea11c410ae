"""Content keys for rows without an id column: 32 hex digits, the row's time then a hash.

The first 16 digits are the observation time (UTC microseconds, offset to sort as unsigned), so
keys of a time-ordered file arrive in order and the unique index grows at its end, as it does
for sequential ids. The last 16 digits hash the row's values (its time and its x... and y) with
the splitmix64 output function (Steele, Lea & Flood 2014, "Fast splittable pseudorandom number
generators"; the multipliers are those of Vigna's public-domain splitmix64.c, from memory),
folded over the row's 64-bit words, for all rows at once with numpy. It is not cryptographic:
two different rows of one model collide only with the same microsecond and a 1 in 2**64 chance;
even then nothing merges silently, because rows with equal keys are compared value by value
and unequal ones are reported as conflicts. The keys are stored, so this function must never
change.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

_SEED = np.uint64(0x9E3779B97F4A7C15)
_SIGN = np.uint64(1 << 63)
_HEX = np.frombuffer(b"0123456789abcdef", dtype=np.uint8)


def _mix(z: NDArray[np.uint64]) -> NDArray[np.uint64]:
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


def content_keys(observed_us: NDArray[np.int64], x: NDArray[np.float64],
                 y: NDArray[np.float64]) -> NDArray[np.object_]:
    """One key per row; equal rows (same instant and same values) get equal keys."""
    n = len(observed_us)
    if n == 0:
        return np.zeros(0, dtype=object)
    when = np.ascontiguousarray(observed_us, dtype=np.int64).view(np.uint64)
    values = np.column_stack([np.asarray(x, dtype=np.float64).reshape(n, -1),
                              np.asarray(y, dtype=np.float64)]) + 0.0  # -0.0 equals 0.0
    h = np.full(n, _SEED, dtype=np.uint64)
    for w in [when, *(np.ascontiguousarray(values[:, j]).view(np.uint64)
                      for j in range(values.shape[1]))]:
        h = _mix(h ^ _mix(w + _SEED))
    raw = np.stack([when ^ _SIGN, h], axis=1).astype(">u8").view(np.uint8).reshape(n, 16)
    digits = np.empty((n, 32), dtype=np.uint8)
    digits[:, 0::2] = _HEX[raw >> 4]
    digits[:, 1::2] = _HEX[raw & 15]
    return np.asarray(digits.view("S32").ravel().astype("U32"), dtype=object)
