"""Interval misses when the day shocks persist from one day to the next.

:mod:`monitor.stats.misses` gives the exact law of a window's misses when day shocks are
independent. When they follow an AR(1) process (``a_d = phi a_d-1 + innovation``, stationary
``N(0, tau²)``) the days' miss counts are positively correlated and the window's count spreads
wider than that law allows, so a coverage test built on it cries wolf.

Here the shock is discretized on the Gauss–Hermite nodes of the exact law and moves between
them by the Markov transition of Tauchen & Hussey (1991, *Econometrica* 59, 371-396):
``P_ij ∝ w_j f(z_j | phi z_i) / f(z_j)``, rows normalized. The window's law is the forward
recursion of a hidden Markov chain: ``alpha_d(j, m) = Bin(n_d, p_j) * Σ_i P_ij alpha_d-1(i, ·)``
(convolution in the miss count ``m``), with ``p_j`` a row's miss probability given the shock at
node ``j``. Only counts up to the observed one are kept exactly (the rest are lumped into one
"more" cell), and each day's binomial only in its Bernstein band (the cells outside hold less
than 1e-22 of a node's mass each), so a p-value costs O(days · nodes · misses · log misses),
the FFT convolutions: linear in the window's rows up to the logarithm, about 1.0-1.2 µs a
window row from 1 000 to 30 000 rows a day for a 14-day window (measured; computing each day's
whole binomial, before the bands, took 1.3-1.7 µs, rising with the rows). With ``phi = 0`` the
recursion is the independent-day law of :class:`monitor.stats.misses.MissLaw`.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np
import scipy
from numpy.typing import ArrayLike, NDArray

from monitor.stats.coverage import CoverageTest, coverage_test
from monitor.stats.misses import (
    NODE_TAIL,
    GuardedMissLaw,
    MissLaw,
    shock_nodes,
    shock_weights,
    window_rows,
)

FloatArray = NDArray[np.float64]


@lru_cache(maxsize=64)
def _transition(phi: float) -> FloatArray:
    """The Tauchen–Hussey transition matrix between the standard-normal shock nodes."""
    z, pi = shock_nodes(), shock_weights()
    sd = np.sqrt(1.0 - phi**2)
    log_cond = -0.5 * ((z[None, :] - phi * z[:, None]) / sd) ** 2 - np.log(sd)
    log_marg = -0.5 * z[None, :] ** 2
    p = pi[None, :] * np.exp(log_cond - log_marg)
    p /= p.sum(axis=1, keepdims=True)
    p.setflags(write=False)
    return p


def persistent_pvalues(law: MissLaw, day_rows: ArrayLike, misses: int,
                       phi: float) -> tuple[float, float]:
    """``P(M >= misses)`` and ``P(M <= misses)`` for a window with AR(1) day shocks."""
    rows = window_rows(day_rows, misses)
    if int(rows.sum()) == 0:
        return float("nan"), float("nan")
    p = law.node_probabilities()
    step_t = np.ascontiguousarray(_transition(round(float(phi), 6)).T)
    cells = misses + 2  # counts 0..misses exactly, then "more than misses"
    size = scipy.fft.next_fast_len(2 * cells - 1, real=True)
    spectra: dict[int, NDArray[np.complex128]] = {}  # a day's law, by its row count
    alpha = shock_weights()[:, None] * _capped_binomial(int(rows[0]), p, cells)
    for n in rows[1:].tolist():
        day = spectra.get(n)
        if day is None:
            day = spectra[n] = scipy.fft.rfft(_capped_binomial(n, p, cells), size, axis=1)
        full = scipy.fft.irfft(scipy.fft.rfft(step_t @ alpha, size, axis=1) * day, size,
                               axis=1)
        alpha = np.empty_like(alpha)
        alpha[:, :cells - 1] = full[:, :cells - 1]
        alpha[:, cells - 1] = full[:, cells - 1:2 * cells - 1].sum(axis=1)
        np.clip(alpha, 0.0, None, out=alpha)
    pmf = alpha.sum(axis=0)
    pmf /= pmf.sum()
    return float(min(pmf[misses:].sum(), 1.0)), float(min(pmf[:misses + 1].sum(), 1.0))


def _capped_binomial(n: int, p: FloatArray, cells: int) -> FloatArray:
    """Per node: ``Bin(n, p_j)`` at ``0..cells-2`` and its remaining mass in the last cell.

    Written with the special functions behind ``scipy.stats.binom`` (its ``logpmf`` and
    ``sf``) rather than through it: the distribution object's argument handling cost about a
    millisecond a call, a day of every window of every night. Each node's probabilities are
    computed only where Bernstein's inequality leaves more than ``NODE_TAIL`` of the node's
    mass outside (``P(|X - np| >= t) <= 2 exp(-t² / (2 (np(1-p) + t/3)))``, as for the
    independent-day law in :mod:`monitor.stats.misses`), and are 0 beyond: a large day's
    binomial fills a few hundred of the window's thousands of cells, and computing all of them
    was most of a p-value's cost.
    """
    top = min(n, cells - 2)  # the highest count kept in its own cell
    spread = np.log(2.0 / NODE_TAIL)
    t = spread / 3.0 + np.sqrt(spread**2 / 9.0 + 2.0 * n * p * (1.0 - p) * spread)
    first = np.clip(np.floor(n * p - t), 0, None).astype(np.int64)
    last = np.minimum(np.ceil(n * p + t), top).astype(np.int64)
    widths = np.maximum(last - first + 1, 0)
    out = np.zeros((p.size, cells), dtype=np.float64)
    if 2 * int(widths.sum()) >= p.size * (top + 1):  # the bands cover most cells: fill all
        k = np.arange(top + 1, dtype=np.float64)
        out[:, :top + 1] = np.exp(_log_binomial(n, k[None, :], p[:, None]))
    else:
        node = np.repeat(np.arange(p.size), widths)
        k = np.arange(int(widths.sum())) + np.repeat(first - np.cumsum(widths) + widths, widths)
        out[node, k] = np.exp(_log_binomial(n, k.astype(np.float64), p[node]))
    out[:, cells - 1] = 0.0 if cells - 2 >= n else scipy.special.bdtrc(cells - 2, n, p)
    return out


def _log_binomial(n: int, k: FloatArray, p: FloatArray) -> FloatArray:
    """``log Bin(n, p)`` at ``k`` (``0 <= k <= n``; ``p`` 0 or 1 give 0 and ``-inf``)."""
    gammaln = scipy.special.gammaln
    return (gammaln(n + 1.0) - gammaln(k + 1.0) - gammaln(n - k + 1.0)
            + scipy.special.xlogy(k, p) + scipy.special.xlog1py(n - k, -p))


@dataclass(frozen=True)
class PersistentMissLaw:
    """A guarded miss law for AR(1) day shocks (``phi`` > 0); the plain one when ``phi = 0``."""

    base: GuardedMissLaw
    phi: float

    def test(self, day_rows: ArrayLike, covered: int, target: float, dispersion: float = 1.0,
             level: float = 0.95) -> CoverageTest:
        rows = np.asarray(day_rows, dtype=np.int64)
        total = int(rows.sum())
        if self.phi <= 0 or total == 0:
            return self.base.test(rows, covered, target, dispersion, level)
        quasi = coverage_test(covered, total, target, dispersion, level)
        misses = total - covered
        low = persistent_pvalues(self.base.wide, rows, misses, self.phi)[0]
        high = persistent_pvalues(self.base.narrow, rows, misses, self.phi)[1]
        return replace(quasi, pvalue_low=low, pvalue_high=high, method="persistent day effects")
