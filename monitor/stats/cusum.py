"""Two-sided tabular CUSUM on standardized values, vectorized, with a state carried across calls.

For standardized values ``u_t`` (mean 0, variance 1 when the process is in control), reference
value ``k`` and decision interval ``h`` (Page 1954; Montgomery, *Introduction to Statistical
Quality Control*, §9.1):

    C+_t = max(0, C+_{t-1} + (u_t - k)),    C-_t = max(0, C-_{t-1} + (-u_t - k)),

and a period signals when ``C+_t > h`` or ``C-_t > h`` (strictly, as Montgomery). Nothing is reset
after a signal; the caller decides (Montgomery's Table 9.2 goes on, C+_30 = 5.30).
``N+_t`` and ``N-_t`` count the periods since that side last stood at zero (Montgomery's N+, N-).

Vectorized form: the recursion is Lindley's (1952), whose solution is a cumulative sum minus its
running minimum, ``C_t = P_t - min(0, min_{j<=t} P_j)`` with ``P_t = C_0 + sum_{j<=t} z_j``. That
form locates at once every period where a side returns to zero. Each run between two zeros is
then re-accumulated from its own start (a few vectorized steps for all runs at once, then the
long runs grouped by length into padded matrices, one ``cumsum`` along the rows each), so every
value is bitwise the value of the one-step recursion. Hence a series cut into chunks, each started
from the previous chunk's :class:`CusumState`, gives exactly the one-pass path. Where the
cumulative-sum form and the recursion disagree about a near-tie with zero, the recursion wins and
the runs after it are recomputed (rarely more than once).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int64]
BoolArray = NDArray[np.bool_]

UPPER, LOWER = 1, -1


@dataclass(frozen=True)
class CusumState:
    """Where both sides stand after the last period, and how long each has been above zero."""

    upper: float
    lower: float
    upper_run: int
    lower_run: int

    def __post_init__(self) -> None:
        for name in ("upper", "lower"):
            value = float(getattr(self, name))
            if not (np.isfinite(value) and value >= 0.0):
                raise ValueError(f"a CUSUM side stands at a finite value >= 0; {name}={value}")
            object.__setattr__(self, name, value)
        for name in ("upper_run", "lower_run"):
            run = int(getattr(self, name))
            if run < 0:
                raise ValueError(f"{name} counts periods and cannot be negative; got {run}")
            object.__setattr__(self, name, run)
        if (self.upper == 0.0 and self.upper_run) or (self.lower == 0.0 and self.lower_run):
            raise ValueError("a side standing at zero has a run of 0 periods")

    @classmethod
    def zero(cls) -> CusumState:
        """Both sides at zero: the start of a chart, or its restart after a promotion."""
        return cls(0.0, 0.0, 0, 0)


@dataclass(frozen=True, eq=False)
class CusumPath:
    """Both sides of a tabular CUSUM over one series (or one chunk of a longer series).

    Indices are 0-based positions in this chunk. ``state`` is where the chart stands after the
    last period; pass it to the next call to continue.
    """

    upper: FloatArray
    lower: FloatArray
    upper_run: IntArray
    lower_run: IntArray
    signal: BoolArray
    k: float
    h: float
    state: CusumState

    def __post_init__(self) -> None:
        for name in ("upper", "lower", "upper_run", "lower_run", "signal"):
            getattr(self, name).setflags(write=False)

    def __len__(self) -> int:
        return len(self.upper)

    @property
    def first_signal(self) -> int | None:
        """Index of the first period where either side exceeds ``h``, or None."""
        hits = np.flatnonzero(self.signal)
        return int(hits[0]) if hits.size else None

    def side(self, i: int) -> int:
        """``+1`` when the upper side leads at period ``i`` (the larger statistic), else ``-1``."""
        return UPPER if self.upper[i] >= self.lower[i] else LOWER

    def onset(self, i: int) -> int:
        """Index of the period after the leading side last stood at zero (the change estimate).

        Montgomery (§9.1, from memory): the run that reached the signal began ``N`` periods
        before it, so the shift is estimated to start at ``i - N + 1``. The index is relative to
        this chunk and is negative when the run began in an earlier chunk (-3: three periods
        before the chunk's first one).
        """
        run = self._run(i)
        return int(i) - run + 1

    def shift(self, i: int) -> float:
        """Montgomery's estimate of the mean shift in standardized units (§9.1, from memory).

        ``+(k + C+/N+)`` when the upper side leads at ``i``, ``-(k + C-/N-)`` when the lower does.
        Multiply by the standardizing scale for response units.
        """
        run = self._run(i)
        if self.side(i) == UPPER:
            return self.k + float(self.upper[i]) / run
        return -(self.k + float(self.lower[i]) / run)

    def _run(self, i: int) -> int:
        i = range(len(self))[i]  # bounds check and negative indices
        run = int(self.upper_run[i] if self.side(i) == UPPER else self.lower_run[i])
        if run == 0:
            raise ValueError(f"both CUSUM sides stand at zero at period {i}: no run under way")
        return run


def tabular_cusum(u: ArrayLike, k: float, h: float, state: CusumState | None = None) -> CusumPath:
    """Two-sided tabular CUSUM of standardized values ``u``, continuing from ``state``.

    ``k >= 0`` is the reference value and ``h > 0`` the decision interval, both in the units of
    ``u``. Values must be finite (skip empty periods before calling).
    """
    values = np.atleast_1d(np.asarray(u, dtype=np.float64))
    if values.ndim != 1:
        raise ValueError(f"a CUSUM runs over one series (1-D); got shape {values.shape}")
    k, h = float(k), float(h)
    if not (np.isfinite(k) and k >= 0.0):
        raise ValueError(f"the reference value k must be finite and >= 0; got {k}")
    if not (np.isfinite(h) and h > 0.0):
        raise ValueError(f"the decision interval h must be finite and > 0; got {h}")
    if not np.all(np.isfinite(values)):
        raise ValueError("CUSUM inputs must be finite; drop periods without data before calling")
    start = CusumState.zero() if state is None else state
    upper, upper_run = _one_side(values - k, start.upper, start.upper_run)
    lower, lower_run = _one_side(-values - k, start.lower, start.lower_run)
    signal = (upper > h) | (lower > h)
    if len(values):
        end = CusumState(float(upper[-1]), float(lower[-1]), int(upper_run[-1]),
                         int(lower_run[-1]))
    else:
        end = start
    return CusumPath(upper, lower, upper_run, lower_run, signal, k, h, end)


def _one_side(z: FloatArray, start: float, start_run: int) -> tuple[FloatArray, IntArray]:
    """``C_t = max(0, C_{t-1} + z_t)`` from ``C_{-1} = start``, and the periods since a zero.

    Lindley (1952): with the walk ``P_t = start + z_0 + ... + z_t``, ``C_t = P_t - min(0,
    min_{j<=t} P_j)``; the side stands at zero exactly where the walk meets that floor.
    """
    n = len(z)
    if n == 0:
        return np.zeros(0), np.zeros(0, dtype=np.int64)
    walk = np.cumsum(z)
    walk += start
    floor = np.minimum.accumulate(np.minimum(walk, 0.0))
    value = walk - floor
    at_zero = value <= 0.0
    value[at_zero] = 0.0
    idx = np.arange(n, dtype=np.int64)
    run = np.where(at_zero, idx, np.int64(-1 - start_run))
    np.maximum.accumulate(run, out=run)
    np.subtract(idx, run, out=run)
    return value, run
