"""Generate ``monitor/stats/data/supf_null.npz``: the limiting null distribution of sup-F.

Under no change, the Wald statistic for a break at the fraction ``λ`` of the sample converges to
``Q(λ) = |B(λ) - λ B(1)|² / (λ (1 - λ))`` with ``B`` a standard ``q``-dimensional Brownian motion,
and sup-F (F form) to ``sup Q(λ) / q`` over ``λ`` in ``[λ1, λ2]`` (Andrews 1993, Theorem 3 and
§4). With ``s = λ / (1 - λ)`` the bridge is ``(1 - λ) W(s)`` (Doob's representation), so
``Q(λ) = |W(s)|² / s``; with ``s = e^v``, ``U(v) = e^(-v/2) W(e^v)`` is a stationary
Ornstein-Uhlenbeck process with ``Cov(U(v), U(v + Δ)) = e^(-Δ/2) I``. The sup over
``[λ1, λ2]`` is therefore the sup of ``|U(v)|²`` over an interval of length
``L = ln π``, ``π = λ2 (1 - λ1) / (λ1 (1 - λ2))``: the law depends only on ``q`` and ``π``
(Andrews 1993, §4).

Simulation: ``U_0 ~ N(0, I)`` and exact AR(1) steps ``U_{j+1} = ρ U_j + sqrt(1 - ρ²) ε_j``,
``ρ = exp(-Δ/2)``, so the only error besides Monte Carlo noise is that the sup is taken on a
grid of step ``Δ``. That grid sup is too small: the radial part ``|U|`` moves like a Brownian
motion with unit variance per unit ``v`` near its maximum, and the maximum of such a path on a
grid of step ``Δ`` falls short of the continuous one by about ``0.5826 √Δ`` (Siegmund 1985,
*Sequential Analysis*; Asmussen, Glynn & Pitman 1995, *Ann. Appl. Probab.* 5; both from memory;
the constant is ``-ζ(1/2)/√(2π)``, computed with scipy).
The generator records the running sup on the full grid and on the grid thinned to every 4th
point (step ``4Δ``), from the same paths, and removes the ``√Δ`` term by Richardson
extrapolation on the square-root scale of every quantile: ``√c₀ = 2 √c(Δ) - √c(4Δ)``. Two
stages: ``Δ = 0.005`` for ``ln π`` up to 7 and ``Δ = 0.00125`` for ``ln π <= 1`` (short ranges,
as in fitwatch's nightly use, where the correction is least regular); each stage uses its own
paths. The generator prints the implied constant (to compare with 0.5826), the largest gap
between the stages where both exist, and the gap between the ``(Δ, 4Δ)`` and ``(2Δ, 8Δ)``
extrapolations; these bound the error left beside the Monte Carlo error (about 0.3 % of a
critical value at level 0.05 and 0.5 % at 0.01 with 400 000 replications).

The quantile at ``L = 0`` (a single candidate) is exact: ``χ²_q / q``. Quantiles are made
non-decreasing in ``L`` (a sup over a longer interval cannot be smaller).

Run: ``python tools/make_supf_table.py`` (about 5 minutes on 2 free cores with the defaults).
"""

from __future__ import annotations

import argparse
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
from scipy import special, stats

SEED = 1993  # Andrews (1993); any fixed value would do
REPLICATIONS = 400_000
LENGTH_MAX = 7.0  # largest ln π; symmetric trimming 2.9 %
# (step Δ in units of v = ln(λ / (1 - λ)), longest ln π simulated with it): a finer step for
# short ranges, where the grid correction is least regular, and the main step for all lengths.
STAGES = ((0.00125, 1.0), (0.005, LENGTH_MAX))
GRID_STEP = 0.04  # spacing of the ln π grid (a multiple of every step * 8)
Q_MAX = 8
THIN = (1, 2, 4, 8)  # grid thinning factors recorded on the same paths
# Upper-tail levels, largest first: coarse above 0.5, log-spaced (ratio ~1.19) from 0.5 to
# 0.001, plus the round levels people ask for, so that those are read without interpolation.
_ROUND = np.array([0.25, 0.1, 0.05, 0.025, 0.01, 0.005, 0.0025])
_GEOM = np.geomspace(0.5, 0.001, 37)
_GEOM = _GEOM[np.min(np.abs(np.log(_GEOM[:, None] / _ROUND[None, :])), axis=1) > 0.02]
LEVELS = np.unique(np.concatenate([[0.99, 0.95, 0.9, 0.8, 0.7, 0.6], _GEOM, _ROUND]))[::-1]
SIEGMUND = float(-special.zeta(0.5) / np.sqrt(2.0 * np.pi))  # 0.5826
OUTPUT = Path(__file__).resolve().parents[1] / "monitor" / "stats" / "data" / "supf_null.npz"


def simulate(q: int, replications: int, step: float, grid: np.ndarray, levels: np.ndarray,
             seed: np.random.SeedSequence, thin: tuple[int, ...] = THIN) -> np.ndarray:
    """Quantiles of ``sup_{v <= L} |U(v)|² / q`` on the grid sup of step ``Δ * thin[i]``.

    All replications advance together (memory: a few arrays of ``replications * q`` floats);
    the quantiles are taken whenever the path reaches a length in ``grid``. Returns an array of
    shape ``(len(thin), len(grid), len(levels))``. Every ``grid`` value must be a multiple of
    ``step * max(thin)``, so that every thinned grid ends exactly at ``L``.
    """
    stride = np.rint(np.asarray(grid) / step).astype(int)
    if np.any(np.abs(stride * step - grid) > 1e-9) or np.any(stride % max(thin)):
        raise ValueError("every grid length must be a multiple of step * max(thin)")
    rho = np.float32(np.exp(-step / 2.0))
    scale = np.float32(np.sqrt(-np.expm1(-step)))  # sqrt(1 - rho²), without cancellation
    rng = np.random.default_rng(seed)
    u = rng.standard_normal((replications, q), dtype=np.float32)
    noise = np.empty_like(u)
    best = np.repeat(np.einsum("ij,ij->i", u, u)[None, :], len(thin), axis=0)
    # a quantile at upper-tail level a is the (1 - a) quantile
    out = np.empty((len(thin), len(grid), len(levels)))
    for j in range(stride[-1] + 1):
        if j > 0:
            rng.standard_normal(out=noise, dtype=np.float32)
            u *= rho
            noise *= scale
            u += noise
            current = np.einsum("ij,ij->i", u, u)
            for t, factor in enumerate(thin):
                if j % factor == 0:
                    np.maximum(best[t], current, out=best[t])
        for g in np.flatnonzero(stride == j):
            out[:, g, :] = np.quantile(best, 1.0 - levels, axis=1).T
    return out / q


def extrapolate(fine: np.ndarray, coarse: np.ndarray) -> np.ndarray:
    """Richardson on the square-root scale for steps Δ and 4Δ (error term ∝ √Δ)."""
    return (2.0 * np.sqrt(fine) - np.sqrt(coarse)) ** 2


def _one(args: tuple[int, int, float, np.ndarray, np.random.SeedSequence]) -> np.ndarray:
    q, replications, step, grid, seed = args
    return simulate(q, replications, step, grid, LEVELS, seed)


def build(replications: int = REPLICATIONS, jobs: int = 2) -> dict[str, np.ndarray]:
    """Simulate both stages for every q and assemble the table and its diagnostics."""
    grid = np.round(np.arange(0.0, LENGTH_MAX + GRID_STEP / 2, GRID_STEP), 10)
    seeds = np.random.SeedSequence(SEED).spawn(len(STAGES) * Q_MAX)
    tasks = [(q, replications, step, grid[grid <= length + 1e-9], seeds[s * Q_MAX + q - 1])
             for s, (step, length) in enumerate(STAGES) for q in range(1, Q_MAX + 1)]
    with ProcessPoolExecutor(max_workers=jobs) as pool:
        done = list(pool.map(_one, tasks))
    # per stage: (q, thin, grid, levels)
    fine_stage, main_stage = (np.stack(done[s * Q_MAX:(s + 1) * Q_MAX]) for s in (0, 1))
    thin = {f: i for i, f in enumerate(THIN)}
    seam = fine_stage.shape[2]  # grid points covered by the fine stage
    main = extrapolate(main_stage[:, thin[1]], main_stage[:, thin[4]])
    fine = extrapolate(fine_stage[:, thin[1]], fine_stage[:, thin[4]])
    table = main.copy()
    table[:, :seam] = fine
    raw = main_stage[:, thin[1]].copy()
    raw[:, :seam] = fine_stage[:, thin[1]]
    qs = np.arange(1, Q_MAX + 1)
    table[:, 0, :] = stats.chi2.isf(LEVELS[None, :], qs[:, None]) / qs[:, None]  # exact
    table = np.maximum.accumulate(table, axis=1)
    usual = (LEVELS <= 0.5) & (LEVELS >= 0.01)
    long = grid >= 1.0
    check = extrapolate(main_stage[:, thin[2]], main_stage[:, thin[8]])
    overlap = (grid >= 0.5) & (grid <= STAGES[0][1] + 1e-9)
    step_main = STAGES[1][0]
    return {
        "q": qs, "log_pi": grid, "levels": LEVELS,
        "quantile": table.astype(np.float32),
        "quantile_grid_step": raw.astype(np.float32),  # before the grid-bias correction
        "step": np.where(np.arange(len(grid)) < seam, STAGES[0][0], step_main),
        "replications": np.array(replications), "seed": np.array(SEED),
        # Diagnostics (levels 0.5..0.01). (1) the two stages are independent paths with
        # different steps: their largest relative gap on ln π in [0.5, 1] bounds the error left
        # there; (2) on the main stage, (Δ, 4Δ) vs (2Δ, 8Δ) extrapolation for ln π >= 1.
        "stage_gap": np.array(float(np.max(np.abs(
            fine[:, overlap[:seam]][..., usual] / main[:, overlap][..., usual] - 1.0)))),
        "extrapolation_spread": np.array(float(np.max(np.abs(
            check[:, long][..., usual] / main[:, long][..., usual] - 1.0)))),
        # (sup |U| on step Δ minus on step 4Δ) / √Δ on the main stage, levels <= 0.1, ln π >= 1
        "implied_constant": np.median(
            ((np.sqrt(main_stage[:, thin[1]]) - np.sqrt(main_stage[:, thin[4]]))
             * np.sqrt(qs)[:, None, None])[:, long][..., LEVELS <= 0.1] / np.sqrt(step_main),
            axis=(1, 2)),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replications", type=int, default=REPLICATIONS)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--out", type=Path, default=OUTPUT)
    args = parser.parse_args()
    started = time.perf_counter()
    table = build(args.replications, jobs=args.jobs)
    args.out.parent.mkdir(parents=True, exist_ok=True)
    np.savez_compressed(args.out, **table)
    print(f"wrote {args.out} ({args.out.stat().st_size / 1024:.0f} KiB) in "
          f"{time.perf_counter() - started:.0f} s")
    print(f"implied grid-sup constant per q (Siegmund: {SIEGMUND:.4f}):",
          np.round(table["implied_constant"], 3))
    print("largest relative gap, levels 0.5..0.01: between the stages on ln π 0.5..1: "
          f"{float(table['stage_gap']):.4f}; (Δ,4Δ) vs (2Δ,8Δ) extrapolation, ln π >= 1: "
          f"{float(table['extrapolation_spread']):.4f}")
    at = int(np.argmin(np.abs(table["log_pi"] - np.log((0.85 / 0.15) ** 2))))
    for alpha in (0.10, 0.05, 0.01):
        j = int(np.argmin(np.abs(table["levels"] - alpha)))
        print(f"15 % trimming (ln pi = {table['log_pi'][at]:.2f}), level {alpha}:",
              np.round(table["quantile"][:5, at, j], 2))


if __name__ == "__main__":
    main()
