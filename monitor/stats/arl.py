"""Average run length (ARL) of the tabular CUSUM for normal increments.

Two methods:

* :func:`siegmund_arl`, Siegmund's (1985, *Sequential Analysis*; as quoted by Hawkins & Olwell
  1998, eq. 3.7, from memory) closed-form approximation
  ``ARL = (exp(-2 Δ b) + 2 Δ b - 1) / (2 Δ²)`` with ``b = h + 1.166`` (``b²`` when ``Δ = 0``),
  quick and good near ``Δ ≈ 0`` but 10-15 % off for large shifts;
* :func:`cusum_arl`, the accurate one: the zero-start ARL ``L(0)`` of the one-sided CUSUM
  ``S_t = max(0, S_{t-1} + X_t - k)``, signal when ``S_t > h``, solves Page's (1954) integral
  equation (Goel & Wu 1971, *Technometrics* 13; Vance 1986, *J. Quality Technology* 18;
  volume numbers from memory)

      L(s) = 1 + L(0) F(k - s) + ∫_0^h L(y) f(y + k - s) dy,    0 <= s <= h,

  with ``F``, ``f`` the distribution and density of ``X``. It is solved by the Nyström method on
  Gauss-Legendre nodes (the kernel is smooth, so the error falls geometrically with the number of
  nodes). A two-sided chart combines its sides by Lucas & Crosier (1982, *Technometrics* 24,
  199-205): ``1/ARL = 1/ARL+ + 1/ARL-``, exact when both sides cannot be above zero at once and
  a close approximation otherwise (within 0.3 % of simulated run lengths for k = 0, 0.25, 0.5;
  tests/benchmarks/sim_calibration.py).

Everything is vectorized over parameter arrays, so a whole bootstrap of charts is one batched
linear solve; :func:`solve_h_many` inverts the ARL for many charts at once.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import scipy
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]

SIEGMUND_CORRECTION = 1.166  # Siegmund (1985): b = h + 1.166 (2 * 0.583, the overshoot term)
_ROOT_2PI = np.sqrt(2.0 * np.pi)
_MAX_ETA = 200.0  # largest decision interval in units of sd that the solvers search up to
_MAX_ARL = 1e12  # longer ARLs are reported as inf (the linear system loses its accuracy)
_LOG_TOL = 1e-11  # |log ARL - log target| that ends the secant iteration
_BATCH_CELLS = 2_000_000  # matrix entries per batched solve (memory bound, about 16 MB)


# Siegmund's approximation --------------------------------------------------------------------
def siegmund_arl(k: ArrayLike, h: ArrayLike, shift: ArrayLike = 0.0,
                 sides: int = 2) -> float | FloatArray:
    """Siegmund's (1985) approximate ARL for a mean shift ``shift`` (in sd units).

    One-sided (upper) with ``sides=1``: ``Δ = shift - k``. Two-sided: ``Δ+ = shift - k``,
    ``Δ- = -shift - k`` and ``1/ARL = 1/ARL+ + 1/ARL-`` (Lucas & Crosier 1982).
    """
    _check_sides(sides)
    k_, h_, d_ = np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in (k, h, shift)))
    b = h_ + SIEGMUND_CORRECTION
    out = _siegmund_one(d_ - k_, b)
    if sides == 2:
        out = 1.0 / (1.0 / out + 1.0 / _siegmund_one(-d_ - k_, b))
    return _scalar_or_array(out)


def _siegmund_one(delta: FloatArray, b: FloatArray) -> FloatArray:
    x = delta * b
    small = np.abs(x) < 1e-4
    safe_delta = np.where(small, 1.0, delta)
    safe_x = np.where(small, 1.0, x)
    exact = (np.expm1(-2.0 * safe_x) + 2.0 * safe_x) / (2.0 * safe_delta**2)
    # series of exp(-2x) + 2x - 1 = 2x² - 4x³/3 + 2x⁴/3 - ..., divided by 2Δ²
    series = b**2 * (1.0 - 2.0 * x / 3.0 + x**2 / 3.0)
    return np.where(small, series, exact)


# the integral equation -----------------------------------------------------------------------
def cusum_arl(k: ArrayLike, h: ArrayLike, mean: ArrayLike = 0.0, sd: ArrayLike = 1.0,
              sides: int = 2) -> float | FloatArray:
    """Zero-start ARL of the tabular CUSUM on i.i.d. ``N(mean, sd²)`` values.

    ``sides=1`` is the upper chart alone; ``sides=2`` the two-sided chart (Lucas & Crosier 1982).
    Arguments broadcast against each other; a scalar result is returned as a float.
    """
    _check_sides(sides)
    k_, h_, m_, s_ = np.broadcast_arrays(*(np.asarray(v, dtype=np.float64)
                                           for v in (k, h, mean, sd)))
    if np.any(k_ < 0) or np.any(h_ < 0) or np.any(~(s_ > 0)):
        raise ValueError("the ARL needs k >= 0, h >= 0 and sd > 0")
    eta = h_ / s_
    upper = _one_sided_arl((m_ - k_) / s_, eta)
    if sides == 1:
        return _scalar_or_array(upper)
    lower = _one_sided_arl((-m_ - k_) / s_, eta)
    with np.errstate(divide="ignore"):  # two sides that never signal: inf
        return _scalar_or_array(1.0 / (1.0 / upper + 1.0 / lower))


def _one_sided_arl(drift: FloatArray, eta: FloatArray) -> FloatArray:
    """ARL of ``S_t = max(0, S_{t-1} + Z_t)``, ``Z ~ N(drift, 1)``, signal at ``S > eta``.

    In standardized units the equation reads
    ``L(s) = 1 + L(0) Φ(-drift - s) + ∫_0^eta L(y) φ(y - s - drift) dy``. With Gauss-Legendre
    nodes ``y_j`` and weights ``w_j`` on ``[0, eta]`` and the unknowns ``L(0), L(y_1..y_m)``, the
    Nyström equations at ``s = 0, y_1, ..., y_m`` form one ``(m+1)``-square system per chart.
    """
    drift = np.asarray(drift, dtype=np.float64)
    shape = drift.shape
    drift, eta = drift.ravel(), np.asarray(eta, dtype=np.float64).ravel()
    out = np.empty(drift.shape)
    if not drift.size:
        return out.reshape(shape)
    sizes = _nodes_for(eta)
    for m in np.unique(sizes):  # one batch per node count (a few distinct counts)
        group = np.flatnonzero(sizes == m)
        step = max(1, _BATCH_CELLS // int(m + 1) ** 2)
        for lo in range(0, group.size, step):
            part = group[lo:lo + step]
            out[part] = _nystrom(drift[part], eta[part], int(m))
    return out.reshape(shape)


def _nystrom(drift: FloatArray, eta: FloatArray, m: int) -> FloatArray:
    x, w = _gauss_legendre(m)
    half = 0.5 * eta[:, None, None]
    unit = np.concatenate([[-1.0], x])  # s = 0, y_1..y_m on the reference interval [-1, 1]
    # y_j - s_i - drift = half * (x_j - unit_i) - drift
    gap = half * (x[None, :] - unit[:, None])[None] - drift[:, None, None]
    system = np.empty((len(eta), m + 1, m + 1))
    system[:, :, 0] = -scipy.special.ndtr(-drift[:, None] - half[:, 0] * (unit + 1.0))  # fall to 0
    system[:, :, 1:] = np.exp(-0.5 * gap * gap) * (-(half[:, 0] * w) / _ROOT_2PI)[:, None, :]
    system[:, np.arange(m + 1), np.arange(m + 1)] += 1.0
    rhs = np.ones((len(eta), m + 1, 1))
    try:
        arl = np.linalg.solve(system, rhs)[:, 0, 0]
    except np.linalg.LinAlgError:  # some chart practically never signals
        arl = np.array([_solve_or_inf(one) for one in system])
    # An ARL this long makes the system as ill-conditioned as double precision allows.
    return np.where((arl >= 1.0) & (arl < _MAX_ARL), arl, np.inf)


def _solve_or_inf(system: FloatArray) -> float:
    try:
        return float(np.linalg.solve(system, np.ones(len(system)))[0])
    except np.linalg.LinAlgError:
        return float("inf")


def _nodes_for(eta: FloatArray) -> NDArray[np.int64]:
    # The kernel is a unit-width Gaussian on [0, eta]; 2 nodes per unit plus 8, rounded up to a
    # multiple of 8 (so that a batch needs few distinct sizes), keeps the quadrature error below
    # 1e-8 relative for ARLs up to 1e6 (tests: against 256 nodes and a Markov chain).
    need = np.ceil((2.0 * np.asarray(eta) + 8.0) / 8.0) * 8.0
    return np.clip(need, 16, 600).astype(np.int64)


@lru_cache(maxsize=64)
def _gauss_legendre(m: int) -> tuple[FloatArray, FloatArray]:
    x, w = np.polynomial.legendre.leggauss(m)
    x.setflags(write=False)
    w.setflags(write=False)
    return x, w


# inverting the ARL ---------------------------------------------------------------------------
def solve_h(k: float, target_arl: float, mean: float = 0.0, sd: float = 1.0,
            sides: int = 2) -> float:
    """The decision interval ``h`` with ``cusum_arl(k, h, mean, sd, sides) == target_arl``.

    Brent's method on ``log ARL(h)``, which is increasing and close to linear in ``h``.
    """
    _check_target(target_arl)

    def gap(h: float) -> float:
        return float(np.log(cusum_arl(k, h, mean, sd, sides))) - np.log(target_arl)

    low = 0.0
    if gap(low) >= 0.0:
        raise ValueError(f"an ARL of {target_arl:g} is reached already at h = 0; "
                         "ask for a longer run length")
    high = 4.0 * sd
    while gap(high) < 0.0:
        low, high = high, 2.0 * high
        if high > _MAX_ETA * sd:
            raise ValueError(f"no h up to {_MAX_ETA * sd:g} reaches an ARL of {target_arl:g} "
                             f"(mean {mean:g}, sd {sd:g}, k {k:g})")
    return float(scipy.optimize.brentq(gap, low, high, xtol=1e-12, rtol=1e-12))


def solve_h_many(k: float, target_arl: float, mean: ArrayLike, sd: ArrayLike,
                 sides: int = 2, xtol: float = 1e-9) -> FloatArray:
    """:func:`solve_h` for many charts at once (arrays ``mean`` and ``sd``, broadcast).

    Bracketed secant iteration on ``log ARL(h)``, every chart advanced by one batched ARL
    evaluation per step. Charts whose target cannot be reached by ``h <= 200 sd`` get ``inf``;
    targets already met at ``h = 0`` get ``0``.
    """
    _check_target(target_arl)
    mean_, sd_ = np.broadcast_arrays(np.asarray(mean, dtype=np.float64),
                                     np.asarray(sd, dtype=np.float64))
    shape = mean_.shape
    mu, sig = mean_.ravel(), sd_.ravel()
    log_target = np.log(target_arl)

    def gap(h: FloatArray, idx: NDArray[np.intp]) -> FloatArray:
        return np.log(cusum_arl(k, h, mu[idx], sig[idx], sides)) - log_target

    every = np.arange(mu.size)
    out = np.full(mu.size, np.nan)
    # Start from [4 sd, 8 sd], which holds the usual answers (h = 5.76 for ARL 1000, k = 0.5).
    a, b = 4.0 * sig, 8.0 * sig
    fa, fb = gap(a, every), gap(b, every)
    low = np.flatnonzero(fa >= 0.0)  # the target lies below 4 sd: bracket [0, 4 sd]
    if low.size:
        b[low], fb[low] = a[low], fa[low]
        a[low] = 0.0
        fa[low] = gap(a[low], low)
        out[low[fa[low] >= 0.0]] = 0.0
    short = np.isnan(out) & (fb < 0.0)
    while short.any():  # double the bracket until the target lies inside
        idx = np.flatnonzero(short)
        a[idx], fa[idx] = b[idx], fb[idx]
        b[idx] = 2.0 * b[idx]
        beyond = b[idx] > _MAX_ETA * sig[idx]
        out[idx[beyond]] = np.inf
        live = idx[~beyond]
        fb[live] = gap(b[live], live)
        short[idx] = False
        short[live] = fb[live] < 0.0
    # Secant steps on the last two iterates (log ARL is nearly linear in h, so they converge in
    # a few steps), kept inside the bracket by a bisection whenever a step would leave it.
    active = np.flatnonzero(np.isnan(out))
    x0, f0, x1, f1 = a.copy(), fa.copy(), b.copy(), fb.copy()
    for _ in range(100):
        if not active.size:
            break
        aa, bb = a[active], b[active]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            slope = (f1[active] - f0[active]) / (x1[active] - x0[active])
            c = x1[active] - f1[active] / slope
        c = np.where(np.isfinite(c) & (c > aa) & (c < bb), c, 0.5 * (aa + bb))
        fc = gap(c, active)
        below = fc < 0.0
        a[active] = np.where(below, c, aa)
        fa[active] = np.where(below, fc, fa[active])
        b[active] = np.where(below, bb, c)
        fb[active] = np.where(below, fb[active], fc)
        done = ((np.abs(c - x1[active]) < xtol) | (b[active] - a[active] < xtol)
                | (np.abs(fc) < _LOG_TOL))
        x0[active], f0[active] = x1[active], f1[active]
        x1[active], f1[active] = c, fc
        out[active[done]] = c[done]
        active = active[~done]
    if active.size:
        out[active] = 0.5 * (a[active] + b[active])
    return out.reshape(shape)


# helpers -------------------------------------------------------------------------------------
def _check_sides(sides: int) -> None:
    if sides not in (1, 2):
        raise ValueError(f"sides must be 1 (upper chart) or 2 (two-sided); got {sides}")


def _check_target(target_arl: float) -> None:
    if not (np.isfinite(target_arl) and target_arl > 1.0):
        raise ValueError(f"a target ARL is a number of periods > 1; got {target_arl}")


def _scalar_or_array(a: FloatArray) -> float | FloatArray:
    return float(a) if np.ndim(a) == 0 else a
