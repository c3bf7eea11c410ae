"""Tests for a change in the model's coefficients, computed from window and day statistics.

Every test takes statistics of ``[x_1, ..., x_k, y]`` (``y`` last), never raw rows: ``reference``
is the active version's fit window, ``recent`` the test window. The model has an intercept, so
``p = k + 1``; ``k = 0`` (intercept only) is allowed. ``RSS`` of a window is its least-squares
residual sum of squares (``comoment[y, y]`` when ``k = 0``).

- :func:`chow_test`: equality of all ``p`` coefficients (Chow 1960, *Econometrica* 28).
- :func:`slope_change_test`: equality of the ``k`` slopes, intercepts free to shift.
- :func:`predictive_failure_test`: Chow's (1960) second test, usable when the recent window
  has fewer rows than ``p``.
- :func:`clustered_change_test`: the Wald version of the first two with day-clustered (CR1)
  covariance, which stays calibrated when rows of one day share a common shock.
- :func:`sup_f_test`: the largest Chow F over candidate change days (Quandt 1960; Andrews 1993),
  from prefix and suffix day statistics, with p-values from :mod:`monitor.stats.supf_null`.

Degenerate but legal data (a window too small for its own fit, a constant predictor, too few
days) give NaN with a :class:`~monitor.errors.DegenerateDataWarning` that says why.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import scipy
from numpy.typing import ArrayLike, NDArray

from monitor.errors import DegenerateDataError, DegenerateDataWarning
from monitor.stats import tails
from monitor.stats.moments import DayMoments, Moments
from monitor.stats.ols import fit_moments
from monitor.stats.supf_null import NullPvalue, load_table, supf_pvalue

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int64]
Restriction = Literal["slopes", "all"]
DEFAULT_TRIM = 0.15
_EPS = float(np.finfo(np.float64).eps)


@dataclass(frozen=True)
class FTest:
    """An F test of a coefficient restriction: ``statistic ~ F(df_num, df_den)`` under no change.

    ``n_clusters`` is the number of days for the day-clustered tests (``None`` otherwise);
    ``reason`` says why ``statistic`` and ``pvalue`` are NaN when they are.
    """

    name: str
    statistic: float
    pvalue: float
    df_num: int
    df_den: int
    n_clusters: int | None = None
    reason: str | None = None


# window fits ------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class _WindowFit:
    coef: FloatArray  # intercept (at the centre the fit was asked for), then slopes
    bread: FloatArray  # (X^T X)^{-1} in the same parametrization
    rss: float


def _fit(moments: Moments, where: str, centre: FloatArray | None = None) -> _WindowFit:
    """Least squares from statistics, with the predictors measured from ``centre``.

    The one place that turns statistics into a fit: ``k >= 1`` goes through :func:`fit_moments`
    (its rank and constant-predictor checks included), ``k = 0`` is the mean.
    """
    k = moments.dim - 1
    if centre is not None and k > 0:
        shift = np.concatenate([centre, [0.0]])
        moments = Moments(moments.n, moments.mean - shift, moments.comoment,
                          moments.minimum - shift, moments.maximum - shift)
    try:
        if k == 0:
            if moments.n <= 1:
                raise DegenerateDataError(
                    "a fit with 1 coefficient needs more than 1 row to estimate its error; "
                    f"got {moments.n}")
            return _WindowFit(moments.mean.copy(), np.array([[1.0 / moments.n]]),
                              float(moments.comoment[0, 0]))
        fit = fit_moments(moments)
    except DegenerateDataError as exc:
        raise DegenerateDataError(f"{where}: {exc}") from exc
    return _WindowFit(fit.coef, fit.cov_unscaled, fit.rss)


def _rss(moments: Moments, where: str) -> float:
    return _fit(moments, where).rss


def _segment_rss(table: DayMoments) -> FloatArray:
    """The least-squares RSS of every entry of ``table`` at once (batched solves).

    NaN where a fit is undefined: no more rows than coefficients, a constant predictor, or
    predictors collinear within the precision that co-moments allow (the same limits as
    :func:`~monitor.stats.ols.fit_moments`).
    """
    k = table.dim - 1
    n = np.asarray(table.n)
    myy = table.comoment[:, k, k]
    if k == 0:
        return np.where(n > 1, myy, np.nan)
    mxx = table.comoment[:, :k, :k]
    mxy = table.comoment[:, :k, k]
    variances = np.einsum("dii->di", mxx)
    tiny = n[:, None] * (64 * _EPS * np.maximum(np.abs(table.mean[:, :k]), 1.0)) ** 2
    ok = (n > k + 1) & np.all(variances > tiny, axis=1)
    scale = np.sqrt(np.where(ok[:, None], variances, 1.0))
    corr = np.where(ok[:, None, None], mxx / (scale[:, :, None] * scale[:, None, :]),
                    np.eye(k))
    eig = np.linalg.eigvalsh(corr)
    ok &= eig[:, 0] > (16 * np.sqrt(_EPS)) ** 2 * eig[:, -1]
    slopes = np.linalg.solve(corr, (mxy / scale)[..., None])[..., 0] / scale
    rss = myy - np.einsum("dj,dj->d", mxy, slopes)
    return np.where(ok, np.maximum(rss, 0.0), np.nan)


def _f_ratio(extra: float, df_num: int, rss: float, df_den: int) -> float:
    """``(extra / df_num) / (rss / df_den)``; rounding can make ``extra`` slightly negative."""
    if not rss > 0.0 or df_den <= 0:
        return float("nan")
    return max(extra, 0.0) / df_num / (rss / df_den)


def _result(name: str, statistic: float, df_num: int, df_den: int,
            n_clusters: int | None = None) -> FTest:
    if math.isnan(statistic):
        return _undefined(name, df_num, df_den, "the unrestricted model fits exactly (RSS = 0)",
                          n_clusters)
    p_value = float(tails.f_sf(statistic, df_num, df_den))
    return FTest(name, statistic, p_value, df_num, df_den, n_clusters)


def _undefined(name: str, df_num: int, df_den: int, reason: str,
               n_clusters: int | None = None) -> FTest:
    warnings.warn(f"{name} test undefined: {reason}", DegenerateDataWarning, stacklevel=3)
    nan = float("nan")
    return FTest(name, nan, nan, df_num, df_den, n_clusters, reason)


def _check_dims(a: Moments | DayMoments, b: Moments | DayMoments) -> int:
    if a.dim != b.dim:
        raise ValueError(f"the windows hold {a.dim} and {b.dim} columns; they must match")
    if a.dim < 1:
        raise ValueError("statistics need at least the response column")
    return a.dim


# two-window tests -------------------------------------------------------------------------------
def chow_test(reference: Moments, recent: Moments) -> FTest:
    """Chow (1960) F for equality of all ``p`` coefficients in the two windows.

    ``F = ((RSS_pooled - RSS_1 - RSS_2) / p) / ((RSS_1 + RSS_2) / (n1 + n2 - 2p))``.
    """
    p = _check_dims(reference, recent)
    df_den = reference.n + recent.n - 2 * p
    try:
        rss1 = _rss(reference, "reference window")
        rss2 = _rss(recent, "recent window")
        rss0 = _rss(reference.merge(recent), "both windows pooled")
    except DegenerateDataError as exc:
        return _undefined("chow", p, df_den, str(exc))
    return _result("chow", _f_ratio(rss0 - rss1 - rss2, p, rss1 + rss2, df_den), p, df_den)


def slope_change_test(reference: Moments, recent: Moments) -> FTest:
    """F test that the ``k`` slopes are equal while each window keeps its own intercept.

    Restricted model: separate intercepts, common slopes; its RSS comes from the pooled
    within-window co-moments ``M1 + M2`` (no between-window term). Unrestricted: separate fits.
    ``F = ((RSS_r - RSS_1 - RSS_2) / k) / ((RSS_1 + RSS_2) / (n1 + n2 - 2p))``.
    """
    p = _check_dims(reference, recent)
    k = p - 1
    if k == 0:
        raise ValueError("an intercept-only model has no slopes to test; use chow_test")
    df_den = reference.n + recent.n - 2 * p
    try:
        rss1 = _rss(reference, "reference window")
        rss2 = _rss(recent, "recent window")
        pooled = reference.merge(recent)
        within = Moments(pooled.n, pooled.mean, reference.comoment + recent.comoment,
                         pooled.minimum, pooled.maximum)
        rss_r = _rss(within, "both windows with separate intercepts")
    except DegenerateDataError as exc:
        return _undefined("slope", k, df_den, str(exc))
    return _result("slope", _f_ratio(rss_r - rss1 - rss2, k, rss1 + rss2, df_den), k, df_den)


def predictive_failure_test(reference: Moments, recent: Moments) -> FTest:
    """Chow's (1960) predictive-failure F: do the recent rows fit the reference model?

    ``F = ((RSS_pooled - RSS_1) / n2) / (RSS_1 / (n1 - p))`` with ``(n2, n1 - p)`` degrees of
    freedom; it equals the F test of one dummy per recent row, and needs no fit on the recent
    window, so it works when that window has fewer rows than ``p``.
    """
    p = _check_dims(reference, recent)
    n2 = recent.n
    df_den = reference.n - p
    if n2 == 0:
        return _undefined("predictive", n2, df_den, "the recent window has no rows")
    try:
        rss1 = _rss(reference, "reference window")
        rss0 = _rss(reference.merge(recent), "both windows pooled")
    except DegenerateDataError as exc:
        return _undefined("predictive", n2, df_den, str(exc))
    return _result("predictive", _f_ratio(rss0 - rss1, n2, rss1, df_den), n2, df_den)


def clustered_change_test(reference_days: DayMoments, recent_days: DayMoments,
                          restriction: Restriction = "slopes", *,
                          smaller_window_df: bool = False) -> FTest:
    """Day-clustered (CR1) Wald test of equal slopes (``"slopes"``) or coefficients (``"all"``).

    Model: separate intercept and slopes per window (the interaction model, ``K = 2p``
    coefficients), fitted by least squares. Covariance: the cluster sandwich with one cluster per
    non-empty day (Liang & Zeger 1986; Arellano 1987), scaled by the CR1 factor
    ``G/(G-1) · (N-1)/(N-K)``. Statistic ``W / q``, compared with ``F(q, G - 1)`` where ``G`` counts
    the non-empty days of both windows (Cameron & Miller 2015, *J. Human Resources* 50);
    this is what statsmodels computes with ``cov_type="cluster"`` and its default corrections.
    With ``smaller_window_df`` the denominator is ``min(G_ref, G_recent) - 1`` instead: each
    window's coefficients get their variance from that window's days alone, so the fewer days
    bound the information (common practice, no source; the CR1 test with 28 recent days rejects
    about twice too often at the 0.1 % level otherwise).

    Each day's score ``X_d^T e_d`` comes from its statistics, with predictors measured from the
    pooled mean ``c``: ``Σ e_i = n ē`` and ``Σ (x_i - c) e_i = (M_xy - M_xx b) + n ē (x̄_d - c)``.
    Day labels must not occur in both windows.
    """
    if restriction not in ("slopes", "all"):
        raise ValueError(f"restriction must be 'slopes' or 'all'; got {restriction!r}")
    p = _check_dims(reference_days, recent_days)
    k = p - 1
    if restriction == "slopes" and k == 0:
        raise ValueError("an intercept-only model has no slopes to test; use restriction='all'")
    name = "slope-cr1" if restriction == "slopes" else "chow-cr1"
    tested = np.arange(1, p) if restriction == "slopes" else np.arange(p)
    q = len(tested)
    ref = reference_days.select(reference_days.n > 0)
    rec = recent_days.select(recent_days.n > 0)
    if np.intersect1d(ref.days, rec.days).size:
        raise ValueError("a day cannot belong to both windows")
    groups = len(ref) + len(rec)
    rows = int(ref.n.sum() + rec.n.sum())
    first, second = ref.total(), rec.total()
    centre = first.merge(second).mean[:k]
    try:
        fits = (_fit(first, "reference window", centre), _fit(second, "recent window", centre))
    except DegenerateDataError as exc:
        return _undefined(name, q, groups - 1, str(exc), groups)
    # cluster sandwich B (sum_d s_d s_d^T) B with the CR1 factor (Cameron & Miller 2015)
    factor = groups / (groups - 1) * (rows - 1) / (rows - 2 * p)
    cov = np.zeros((q, q))
    for days, fit in zip((ref, rec), fits, strict=True):
        scores = _day_scores(days, fit, centre)
        sandwich = fit.bread @ (scores.T @ scores) @ fit.bread
        cov += factor * sandwich[np.ix_(tested, tested)]
    diff = fits[0].coef[tested] - fits[1].coef[tested]
    # Scale-free singularity check: eigenvalues of the clustered covariance relative to the
    # i.i.d. one (design effects, normally 0.1..100). Within a window the day scores sum to
    # zero, so a window of one day contributes only rounding noise.
    rss = fits[0].rss + fits[1].rss
    if not rss > 0.0:
        return _undefined(name, q, groups - 1, "the unrestricted model fits exactly (RSS = 0)",
                          groups)
    iid = rss / (rows - 2 * p) * (fits[0].bread + fits[1].bread)[np.ix_(tested, tested)]
    if scipy.linalg.eigh(cov, iid, eigvals_only=True)[0] <= 1e-8:
        return _undefined(name, q, groups - 1,
                          f"the day-clustered covariance of the {q} tested differences is "
                          f"singular; {groups} days are too few", groups)
    wald = float(diff @ np.linalg.solve(cov, diff))
    df_den = min(len(ref), len(rec)) - 1 if smaller_window_df else groups - 1
    if df_den < 1:
        return _undefined(name, q, df_den, "one window has a single day", groups)
    return _result(name, wald / q, q, df_den, groups)


def _day_scores(days: DayMoments, fit: _WindowFit, centre: FloatArray) -> FloatArray:
    """``X_d^T e_d`` per day for the design ``[1, x - centre]``, from the day statistics."""
    k = days.dim - 1
    slopes = fit.coef[1:]
    offset = days.mean[:, :k] - centre
    total = days.n * (days.mean[:, k] - fit.coef[0] - offset @ slopes)  # n_d · mean residual
    within = days.comoment[:, :k, k] - days.comoment[:, :k, :k] @ slopes
    return np.column_stack([total, within + total[:, None] * offset])


# unknown change date ----------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class SupF:
    """sup-F (Quandt 1960; Andrews 1993) over candidate change days.

    ``path[j]`` is the Chow F (F form: Wald / q, ``q = p``) of "days ``0..candidates[j]``" against
    "the days after"; ``statistic`` is its largest value. ``location`` is the index of the LAST
    day of the first segment at the maximum (strucchange's convention, its observation number
    minus one): on the Nile series it is 27, observation 28, the year 1898, so the new regime
    starts in 1899. ``last_day`` and ``first_new_day`` are the labels around that boundary.
    ``lambda_bounds`` are the row fractions before the first and the last candidate; with ``q``
    they fix the null distribution. ``pvalue_bound`` is ``"<"`` or ``">"`` when ``pvalue`` is only
    a bound from the table's ends (see :class:`monitor.stats.supf_null.NullPvalue`).
    """

    statistic: float
    pvalue: float
    pvalue_bound: Literal["<", ">"] | None
    location: int | None
    last_day: Any
    first_new_day: Any
    path: FloatArray
    candidates: IntArray
    lambda_bounds: tuple[float, float]
    q: int
    df_den: int

    def pvalue_text(self) -> str:
        """``"0.034"``, ``"< 0.001"``...: the p-value with its bound, as a reader should see it."""
        return NullPvalue(self.pvalue, self.pvalue_bound).text()

    def __post_init__(self) -> None:
        for name in ("path", "candidates"):
            arr = np.array(getattr(self, name))
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)


def symmetric_candidates(counts: ArrayLike, trim: float = DEFAULT_TRIM) -> IntArray:
    """Candidates with at least ``h = floor(trim · N)`` rows on each side, ``N`` = all rows.

    With one row per day this is strucchange's convention (``from = floor(0.15 n)``,
    ``to = n - from``, inclusive, on observations): Nile, ``n = 100``, gives observations
    15..85, i.e. indices 14..84. Returns indices of the last day of the first segment.
    """
    counts, total, cum = _counts(counts, trim)
    h = max(math.floor(trim * total), 1)
    return _distinct_splits((cum >= h) & (total - cum >= h), counts)


def nightly_candidates(counts: ArrayLike, n_reference_days: int,
                       trim: float = DEFAULT_TRIM) -> IntArray:
    """fitwatch's nightly range: the sample is the reference days followed by the recent days.

    Candidates run from the boundary at the start of the recent window (index
    ``n_reference_days - 1``) to the last boundary that leaves at least ``trim`` of the sample's
    rows after it; any candidate must also leave at least ``trim`` of the rows before it, so
    ``λ1 >= max(trim, reference rows / all rows)``. When the recent window holds less than
    ``trim`` of all rows there is no candidate.
    """
    counts, total, cum = _counts(counts, trim)
    if not 0 <= n_reference_days <= len(counts):
        raise ValueError(f"n_reference_days must lie in 0..{len(counts)}; got {n_reference_days}")
    need = trim * total
    ok = ((np.arange(len(counts)) >= n_reference_days - 1) & (cum >= need) & (cum > 0)
          & (total - cum >= need) & (total - cum > 0))
    return _distinct_splits(ok, counts)


def _counts(counts: ArrayLike, trim: float) -> tuple[IntArray, int, IntArray]:
    if not 0.0 < trim < 0.5:
        raise ValueError(f"trim must lie strictly between 0 and 0.5; got {trim}")
    arr = np.asarray(counts, dtype=np.int64)
    return arr, int(arr.sum()), np.cumsum(arr)


def _distinct_splits(ok: NDArray[np.bool_], counts: IntArray) -> IntArray:
    """Indices where ``ok``, without a split after an empty day (same rows as the one before)."""
    repeat = np.zeros_like(ok)
    repeat[1:] = ok[:-1] & (counts[1:] == 0)
    return np.flatnonzero(ok & ~repeat).astype(np.int64)


def sup_f_test(days: DayMoments, candidates: ArrayLike | None = None) -> SupF:
    """The largest Chow F over candidate boundaries (default: :func:`symmetric_candidates`).

    Each split's RSS comes from the prefix and suffix statistics (:meth:`DayMoments.prefix`,
    :meth:`DayMoments.suffix`), never from a refit on rows. The p-value is the asymptotic one of
    Andrews (1993) for ``q = p`` restrictions over ``lambda_bounds``.
    """
    q = days.dim
    counts = np.asarray(days.n, dtype=np.int64)
    cand = symmetric_candidates(counts) if candidates is None else np.asarray(candidates)
    cand = cand.astype(np.int64)
    total, cum = int(counts.sum()), np.cumsum(counts)
    if cand.ndim != 1 or np.any(np.diff(cand) <= 0):
        raise ValueError("candidates must be a strictly increasing 1-D array of day indices")
    if cand.size and (cand[0] < 0 or cand[-1] >= len(days) - 1
                      or cum[cand[0]] == 0 or cum[cand[-1]] == total):
        raise ValueError("every candidate must leave at least one row on each side")
    df_den = total - 2 * q
    path = np.full(cand.size, np.nan)
    nan = float("nan")
    if cand.size == 0:
        warnings.warn("sup-F undefined: no candidate change day (the trimmed range is empty)",
                      DegenerateDataWarning, stacklevel=2)
        return SupF(nan, nan, None, None, None, None, path, cand, (nan, nan), q, df_den)
    bounds = (float(cum[cand[0]] / total), float(cum[cand[-1]] / total))
    reasons = []
    try:
        rss0 = _rss(days.total(), "whole sample")
    except DegenerateDataError as exc:
        reasons.append(str(exc))
    else:
        rss = (_segment_rss(days.prefix().select(cand))
               + _segment_rss(days.suffix().select(cand + 1)))
        with np.errstate(invalid="ignore", divide="ignore"):
            path = np.maximum(rss0 - rss, 0.0) / q / (rss / df_den)
        path[~(rss > 0)] = np.nan
        if not np.all(rss > 0):
            reasons.append("a segment is too short or its predictors are constant or collinear")
    finite = np.isfinite(path)
    if not finite.all():
        skipped = int((~finite).sum())
        why = reasons[0] if reasons else "the segments fit exactly (RSS = 0)"
        warnings.warn(f"sup-F: {skipped} of {cand.size} candidate splits undefined ({why})",
                      DegenerateDataWarning, stacklevel=2)
    if not finite.any():
        return SupF(nan, nan, None, None, None, None, path, cand, bounds, q, df_den)
    best = int(np.nanargmax(path))
    location = int(cand[best])
    statistic = float(path[best])
    if q > load_table().q_max:
        warnings.warn(f"sup-F p-value undefined: the null table covers q <= {load_table().q_max}, "
                      f"this model has q = {q}", DegenerateDataWarning, stacklevel=2)
        pvalue, bound = nan, None
    else:
        result = supf_pvalue(statistic, q, bounds)
        pvalue, bound = result.pvalue, result.bound
    return SupF(statistic, pvalue, bound, location, days.days[location], days.days[location + 1],
                path, cand, bounds, q, df_den)
