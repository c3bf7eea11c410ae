"""The limiting null distribution of sup-F and its p-values, from a shipped table.

Under no change, sup-F in F form (the largest Chow F over candidate break fractions ``λ`` in
``[λ1, λ2]``, each being the Wald statistic divided by ``q``) converges to
``sup_λ |B(λ) - λ B(1)|² / (λ (1 - λ) q)``, whose law depends only on ``q`` and
``π = λ2 (1 - λ1) / (λ1 (1 - λ2))`` (Andrews 1993, *Econometrica* 61, Theorem 3 and §4). The
table ``data/supf_null.npz`` holds its upper quantiles for ``q = 1..8``, ``ln π`` from 0 to 7 in
steps of 0.04, and upper-tail levels from 0.99 down to 0.001 (log-spaced below 0.5). It is
produced by ``tools/make_supf_table.py`` (seeded simulation of the equivalent stationary
Ornstein-Uhlenbeck process; 400 000 replications, steps 0.00125 for ``ln π <= 1`` and 0.005
beyond, the grid bias removed by Richardson extrapolation; the docstring there gives the
details and the accuracy).

Lookup: quantiles are interpolated linearly in ``ln π``, then ``ln p`` linearly in the
statistic between tabulated levels. Outside the tabulated levels the answer is a bound, never an
extrapolated number: ``pvalue = 0.001`` with ``bound = "<"`` means p < 0.001.

Reading the packaged table once (cached) is the only file access in ``monitor.stats``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cache
from importlib import resources
from typing import Literal

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]
TABLE_FILE = "supf_null.npz"


@dataclass(frozen=True)
class NullTable:
    """The shipped quantiles: ``quantile[q - 1, i, j]`` at ``ln π = log_pi[i]``, ``levels[j]``."""

    q_max: int
    log_pi: FloatArray
    levels: FloatArray
    quantile: FloatArray
    replications: int
    step: FloatArray  # simulation step used at each ln π
    seed: int

    @property
    def smallest_level(self) -> float:
        return float(self.levels[-1])

    @property
    def largest_level(self) -> float:
        return float(self.levels[0])

    def quantiles_at(self, q: int, log_pi: float) -> FloatArray:
        """Quantiles at every tabulated level for ``q`` and ``ln π`` (linear in ``ln π``)."""
        if not 1 <= q <= self.q_max:
            raise ValueError(f"the sup-F table covers q = 1..{self.q_max}; got q = {q}")
        if not 0.0 <= log_pi <= self.log_pi[-1]:
            raise ValueError(f"ln π = {log_pi:.3f} lies outside the table's 0..{self.log_pi[-1]:g}")
        rows = self.quantile[q - 1]
        i = int(np.clip(np.searchsorted(self.log_pi, log_pi) - 1, 0, len(self.log_pi) - 2))
        w = (log_pi - self.log_pi[i]) / (self.log_pi[i + 1] - self.log_pi[i])
        return (1.0 - w) * rows[i] + w * rows[i + 1]


@dataclass(frozen=True)
class NullPvalue:
    """A p-value from the table; ``bound`` says whether it is only a bound.

    ``bound`` is ``None`` for an interpolated value, ``"<"`` when the true p-value lies below
    ``pvalue`` (the statistic is beyond the table's smallest level, or the candidate range is
    longer than the table and ``pvalue`` is a union bound), ``">"`` when it lies above
    ``pvalue`` (the statistic is below the table's largest level).
    """

    pvalue: float
    bound: Literal["<", ">"] | None = None

    def text(self) -> str:
        """``"0.034"``, ``"< 0.001"``, ``"> 0.99"``: the p-value as a reader should see it."""
        if math.isnan(self.pvalue):
            return "n/a"
        shown = f"{self.pvalue:.2g}" if self.pvalue < 0.01 else f"{self.pvalue:.3f}"
        return f"{self.bound} {shown}" if self.bound else shown


@cache
def load_table() -> NullTable:
    """The packaged table (read once per process)."""
    source = resources.files("monitor.stats").joinpath("data", TABLE_FILE)
    with source.open("rb") as handle, np.load(handle) as data:
        return NullTable(
            q_max=int(data["q"][-1]),
            log_pi=np.asarray(data["log_pi"], dtype=np.float64),
            levels=np.asarray(data["levels"], dtype=np.float64),
            quantile=np.asarray(data["quantile"], dtype=np.float64),
            replications=int(data["replications"]),
            step=np.asarray(data["step"], dtype=np.float64),
            seed=int(data["seed"]),
        )


def log_pi(lambda_bounds: tuple[float, float]) -> float:
    """``ln π``, ``π = λ2 (1 - λ1) / (λ1 (1 - λ2))`` (Andrews 1993, §4): the one shape parameter."""
    lo, hi = lambda_bounds
    if not 0.0 < lo <= hi < 1.0:
        raise ValueError(f"need 0 < λ1 <= λ2 < 1; got λ1 = {lo}, λ2 = {hi}")
    return math.log(hi / (1.0 - hi)) - math.log(lo / (1.0 - lo))


def supf_pvalue(statistic: float, q: int, lambda_bounds: tuple[float, float]) -> NullPvalue:
    """Asymptotic p-value of sup-F (F form) for ``q`` restrictions over ``[λ1, λ2]``.

    For ``ln π`` beyond the table (trimming below about 3 %) the p-value is the union bound
    ``ceil(ln π / L) · p(L)`` at the table's largest length ``L`` (the process is stationary in
    ``ln π``), flagged ``"<"``.
    """
    if math.isnan(statistic):
        return NullPvalue(float("nan"))
    table = load_table()
    length = log_pi(lambda_bounds)
    pieces = 1
    if length > table.log_pi[-1]:
        pieces = math.ceil(length / table.log_pi[-1])
        length = float(table.log_pi[-1])
    crit = table.quantiles_at(q, length)
    if statistic > crit[-1]:
        return NullPvalue(min(1.0, pieces * table.smallest_level), "<")
    if statistic < crit[0]:
        return NullPvalue(table.largest_level, ">")
    p = float(np.exp(np.interp(statistic, crit, np.log(table.levels))))
    if pieces > 1:
        return NullPvalue(min(1.0, pieces * p), "<")
    return NullPvalue(p)


def supf_critical_value(alpha: float, q: int, lambda_bounds: tuple[float, float]) -> float:
    """The level-``alpha`` critical value of sup-F (F form) from the table."""
    table = load_table()
    if not table.smallest_level <= alpha <= table.largest_level:
        raise ValueError(f"the table covers levels {table.smallest_level:g}.."
                         f"{table.largest_level:g}; got {alpha}")
    crit = table.quantiles_at(q, log_pi(lambda_bounds))
    # levels decrease along the table, so reverse both for interpolation in ln(level)
    return float(np.interp(math.log(alpha), np.log(table.levels[::-1]), crit[::-1]))
