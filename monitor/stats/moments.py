"""Mergeable sufficient statistics of the columns ``[x_1, ..., x_k, y]``.

A :class:`Moments` holds the count, the column means and the centred co-moment matrix
``sum((v - mean)(v - mean)^T)`` of a set of rows, plus the column minima and maxima. Two sets
merge with the pairwise update of Chan, Golub & LeVeque (1979, "Updating formulae and a pairwise
algorithm for computing sample variances"), which is exact in exact arithmetic and stable in
floating point because it never forms raw sums of squares.

:class:`DayMoments` holds one :class:`Moments` per day as stacked arrays, so that windows,
prefixes and suffixes of days are computed for all positions at once by vectorized pairwise
merges (never a Python loop over rows, never differences of large cumulative sums).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]


def _frozen(a: ArrayLike) -> FloatArray:
    out = np.array(a, dtype=np.float64)  # always a private copy
    out.setflags(write=False)
    return out


@dataclass(frozen=True, eq=False)
class Moments:
    """Count, means, centred co-moments and ranges of rows of ``[x_1, ..., x_k, y]``."""

    n: int
    mean: FloatArray
    comoment: FloatArray
    minimum: FloatArray
    maximum: FloatArray

    def __post_init__(self) -> None:
        m = np.asarray(self.mean).shape[0]
        object.__setattr__(self, "n", int(self.n))
        object.__setattr__(self, "mean", _frozen(self.mean))
        object.__setattr__(self, "comoment", _frozen(np.reshape(self.comoment, (m, m))))
        object.__setattr__(self, "minimum", _frozen(self.minimum))
        object.__setattr__(self, "maximum", _frozen(self.maximum))
        if self.n < 0:
            raise ValueError("a row count cannot be negative")

    # construction -----------------------------------------------------------------------
    @classmethod
    def empty(cls, dim: int) -> Moments:
        """Statistics of no rows over ``dim`` columns (the neutral element of :meth:`merge`)."""
        return cls(0, np.zeros(dim), np.zeros((dim, dim)), np.full(dim, np.inf),
                   np.full(dim, -np.inf))

    @classmethod
    def of(cls, rows: ArrayLike) -> Moments:
        """Statistics of the rows of a 2-D array (one column per variable, ``y`` last)."""
        data = np.asarray(rows, dtype=np.float64)
        if data.ndim != 2:
            raise ValueError("rows must be a 2-D array: one row per observation")
        if data.shape[0] == 0:
            return cls.empty(data.shape[1])
        mean = data.mean(axis=0)
        centred = data - mean
        return cls(data.shape[0], mean, centred.T @ centred, data.min(axis=0), data.max(axis=0))

    # algebra ----------------------------------------------------------------------------
    @property
    def dim(self) -> int:
        return self.mean.shape[0]

    def merge(self, other: Moments) -> Moments:
        """Statistics of the union of both row sets (Chan, Golub & LeVeque 1979, eq. 2.1)."""
        if other.dim != self.dim:
            raise ValueError(f"cannot merge statistics over {self.dim} and {other.dim} columns")
        if other.n == 0:
            return self
        if self.n == 0:
            return other
        n = self.n + other.n
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.n / n)
        comoment = self.comoment + other.comoment + np.outer(delta, delta) * (self.n * other.n / n)
        return Moments(n, mean, comoment, np.minimum(self.minimum, other.minimum),
                       np.maximum(self.maximum, other.maximum))

    @staticmethod
    def merge_all(parts: Iterable[Moments], dim: int) -> Moments:
        """Merge any number of parts (an empty iterable gives :meth:`empty`)."""
        total = Moments.empty(dim)
        for part in parts:
            total = total.merge(part)
        return total

    # storage ----------------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready form; floats keep their exact value (``repr`` round-trips)."""
        def listed(a: FloatArray) -> list[Any]:
            return [None if not np.isfinite(v) else float(v) for v in a.ravel()]

        return {"n": self.n, "mean": listed(self.mean), "comoment": listed(self.comoment),
                "minimum": listed(self.minimum), "maximum": listed(self.maximum)}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Moments:
        def unlisted(values: Sequence[Any], missing: float) -> FloatArray:
            return np.array([missing if v is None else v for v in values], dtype=np.float64)

        mean = unlisted(data["mean"], np.nan)
        if int(data["n"]) == 0:
            return cls.empty(mean.shape[0])
        return cls(int(data["n"]), mean, unlisted(data["comoment"], np.nan),
                   unlisted(data["minimum"], np.nan), unlisted(data["maximum"], np.nan))


@dataclass(frozen=True, eq=False)
class DayMoments:
    """One :class:`Moments` per day, stacked: ``n[d]``, ``mean[d]``, ``comoment[d]``.

    ``days`` holds one label per entry (usually ``numpy.datetime64`` days), in order.
    Entries with ``n == 0`` are allowed and neutral.
    """

    days: NDArray[Any]
    n: NDArray[np.int64]
    mean: FloatArray
    comoment: FloatArray
    minimum: FloatArray
    maximum: FloatArray

    def __post_init__(self) -> None:
        count = len(self.n)
        shapes = (len(self.days), self.mean.shape[0], self.comoment.shape[0])
        if any(s != count for s in shapes):
            raise ValueError("every per-day array needs one entry per day")
        for name in ("n", "mean", "comoment", "minimum", "maximum", "days"):
            arr = getattr(self, name)
            if not (isinstance(arr, np.ndarray) and not arr.flags.writeable):
                arr = np.array(arr)  # a private copy; read-only arrays (views of frozen
                arr.setflags(write=False)  # tables, merge results) are shared as they are
            object.__setattr__(self, name, arr)

    @property
    def dim(self) -> int:
        return self.mean.shape[1]

    def __len__(self) -> int:
        return len(self.n)

    @classmethod
    def empty(cls, dim: int) -> DayMoments:
        return cls(np.array([], dtype="datetime64[D]"), np.zeros(0, dtype=np.int64),
                   np.zeros((0, dim)), np.zeros((0, dim, dim)), np.zeros((0, dim)),
                   np.zeros((0, dim)))

    @classmethod
    def stack(cls, days: ArrayLike, parts: Sequence[Moments], dim: int) -> DayMoments:
        if not parts:
            return cls.empty(dim)
        return cls(np.asarray(days), np.array([p.n for p in parts], dtype=np.int64),
                   np.stack([p.mean for p in parts]), np.stack([p.comoment for p in parts]),
                   np.stack([p.minimum for p in parts]), np.stack([p.maximum for p in parts]))

    @classmethod
    def from_rows(cls, labels: ArrayLike, rows: ArrayLike) -> DayMoments:
        """Per-label statistics of ``rows``; labels need not be sorted. Vectorized per column."""
        labels = np.asarray(labels)
        data = np.asarray(rows, dtype=np.float64)
        if data.ndim != 2 or data.shape[0] != labels.shape[0]:
            raise ValueError("rows must be 2-D with one label per row")
        dim = data.shape[1]
        if data.shape[0] == 0:
            return cls.empty(dim)
        order = np.argsort(labels, kind="stable")
        labels, data = labels[order], data[order]
        days, starts, counts = np.unique(labels, return_index=True, return_counts=True)
        sums = np.add.reduceat(data, starts, axis=0)
        mean = sums / counts[:, None]
        centred = data - np.repeat(mean, counts, axis=0)
        comoment = np.empty((len(days), dim, dim))
        for i in range(dim):
            for j in range(i, dim):
                block = np.add.reduceat(centred[:, i] * centred[:, j], starts)
                comoment[:, i, j] = block
                comoment[:, j, i] = block
        return cls(days, counts.astype(np.int64), mean, comoment,
                   np.minimum.reduceat(data, starts, axis=0),
                   np.maximum.reduceat(data, starts, axis=0))

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready form (day labels as ISO strings); see :meth:`from_dict`."""
        return {"days": [str(d) for d in self.days],
                "parts": [self.day(i).to_dict() for i in range(len(self))],
                "dim": self.dim}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> DayMoments:
        days = np.array(data["days"], dtype="datetime64[D]")
        return cls.stack(days, [Moments.from_dict(p) for p in data["parts"]], int(data["dim"]))

    def day(self, i: int) -> Moments:
        if self.n[i] == 0:
            return Moments.empty(self.dim)
        return Moments(int(self.n[i]), self.mean[i], self.comoment[i], self.minimum[i],
                       self.maximum[i])

    def select(self, index: Any) -> DayMoments:
        """The entries picked by a slice, boolean mask or index array."""
        return DayMoments(self.days[index], self.n[index], self.mean[index],
                          self.comoment[index], self.minimum[index], self.maximum[index])

    def then(self, later: DayMoments) -> DayMoments:
        """These days followed by ``later``'s (no merging: entries are appended)."""
        return _concat(self, later)

    def total(self) -> Moments:
        """All days merged into one :class:`Moments`: a pairwise tree of merges, halving the
        table each round (the pairwise algorithm of Chan, Golub & LeVeque 1979)."""
        if len(self) == 0:
            return Moments.empty(self.dim)
        out = self
        while len(out) > 1:
            pairs = len(out) // 2
            merged = _merge_arrays(out.select(slice(0, 2 * pairs, 2)),
                                   out.select(slice(1, 2 * pairs, 2)))
            out = _concat(merged, out.select(slice(2 * pairs, None))) if len(out) % 2 \
                else merged
        return out.day(0)

    def prefix(self) -> DayMoments:
        """Entry ``d`` is days ``0..d`` merged (ranges included).

        An inclusive scan with the pairwise merge (Hillis & Steele 1986): ``log2(days)``
        vectorized rounds, each merging every entry with the one ``2^r`` places before it.
        """
        out = self
        offset = 1
        while offset < len(self):
            merged = _merge_arrays(out.select(slice(None, -offset)),
                                   out.select(slice(offset, None)))
            out = _concat(out.select(slice(None, offset)), merged)
            offset *= 2
        return out

    def suffix(self) -> DayMoments:
        """Entry ``d`` is days ``d..end`` merged (ranges included)."""
        return self.select(slice(None, None, -1)).prefix().select(slice(None, None, -1))

    def rolling(self, window: int) -> DayMoments:
        """Entry ``d`` is days ``max(0, d - window + 1)..d`` merged.

        ``window - 1`` vectorized pairwise merges of the table with itself shifted by one more
        day each time; exact (no differences of cumulative sums).
        """
        if window < 1:
            raise ValueError("a window holds at least one day")
        out = self
        for lag in range(1, min(window, len(self))):
            merged = _merge_arrays(self.select(slice(None, -lag)), out.select(slice(lag, None)))
            out = _concat(out.select(slice(None, lag)), merged)
        return out


def _merge_arrays(a: DayMoments, b: DayMoments) -> DayMoments:
    """Entry-wise pairwise merge of two equally long tables (day labels taken from ``b``)."""
    n = a.n + b.n
    wa, wb = a.n.astype(np.float64), b.n.astype(np.float64)
    share = wb / np.maximum(n, 1)
    delta = np.where(((a.n > 0) & (b.n > 0))[:, None], b.mean - a.mean, 0.0)
    mean = np.where((a.n == 0)[:, None], b.mean, a.mean + delta * share[:, None])
    weight = (wa * share)[:, None, None]
    comoment = (np.where((a.n > 0)[:, None, None], a.comoment, 0.0)
                + np.where((b.n > 0)[:, None, None], b.comoment, 0.0)
                + weight * delta[:, :, None] * delta[:, None, :])
    return DayMoments(b.days, n, mean, comoment, np.minimum(a.minimum, b.minimum),
                      np.maximum(a.maximum, b.maximum))


def _concat(a: DayMoments, b: DayMoments) -> DayMoments:
    return DayMoments(np.concatenate([a.days, b.days]), np.concatenate([a.n, b.n]),
                      np.concatenate([a.mean, b.mean]), np.concatenate([a.comoment, b.comoment]),
                      np.concatenate([a.minimum, b.minimum]),
                      np.concatenate([a.maximum, b.maximum]))


_CONDITION = 1e10  # a day whose cross-product matrix is worse conditioned gives no slope


@dataclass(frozen=True, eq=False)
class DaySlopes:
    """Each day's within-day slopes against a reference: deviations and their unit variances.

    ``deviation[d, j] = b_dj - beta_j`` and ``unit[d, j] = (Sxx_d⁻¹)_jj`` (times the within-day
    variance it is the deviation's variance); ``usable[d]`` is False for days whose rows do not
    pin down a slope (fewer than ``k + 1`` rows, or no spread in some predictor).
    """

    deviation: FloatArray
    unit: FloatArray
    usable: NDArray[np.bool_]


def day_slopes(comoment: ArrayLike, n: ArrayLike, slopes: ArrayLike) -> DaySlopes:
    """Within-day slope deviations of days with centred co-moments ``comoment`` (``(G, k+1,
    k+1)``, the response last) and ``n`` rows from the reference ``slopes``."""
    c = np.asarray(comoment, dtype=np.float64)
    counts = np.asarray(n, dtype=np.float64).ravel()
    beta = np.asarray(slopes, dtype=np.float64).ravel()
    k = len(beta)
    g = c.shape[0]
    sxx, sxy = c[:, :k, :k], c[:, :k, k]
    diag = np.einsum("djj->dj", sxx)
    usable = counts >= k + 1
    usable &= np.all(diag > 0, axis=1)
    if usable.any():
        cond = np.full(g, np.inf)
        cond[usable] = np.linalg.cond(sxx[usable])
        usable &= cond < _CONDITION
    deviation = np.full((g, k), np.nan)
    unit = np.full((g, k), np.nan)
    if usable.any():
        inv = np.linalg.inv(sxx[usable])
        deviation[usable] = np.einsum("djk,dk->dj", inv, sxy[usable]) - beta
        unit[usable] = np.einsum("djj->dj", inv)
    return DaySlopes(deviation, unit, usable)
