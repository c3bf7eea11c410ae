"""What the fit window says about departures from the textbook model, tested at fit time.

The monitor's signals assume independent day shocks, normal rows, no calendar rhythm and a
spread that does not grow with the predictors. Operations data break each of these; a version
records how its own fit window did, and the charts use what was found (persistence, a robust
spread reference). Four questions, each a standard test on the fit window's residuals against
the fitted line ``r = y - X b``:

* **Persistence of day shocks.** ``u_d = rbar_d / sqrt(tau² + sigma_w²/n_d)`` for the days with
  rows, in day order; the lag-1 autocorrelation ``r1`` (Yule–Walker) and the Ljung–Box statistic
  ``Q = G (G + 2) Σ_{l<=m} r_l² / (G - l)`` on ``m`` lags, chi-square with ``m`` degrees of
  freedom (Ljung & Box 1978, *Biometrika* 65, 297-303).
* **A weekday rhythm.** One-way analysis of variance of the ``u_d`` by weekday, ``F`` on
  ``(W - 1, G - W)`` degrees of freedom for the ``W`` weekdays with rows (Fisher's F test).
* **Spread growing with a predictor.** Koenker's studentized Breusch–Pagan test: ``N R²`` of the
  squared within-day residuals regressed on the predictors, chi-square with ``k`` degrees of
  freedom (Breusch & Pagan 1979; Koenker 1981, *J. Econometrics* 17, 107-112). Within-day
  residuals ``w = r - rbar_d`` are free of the day shocks.
* **Heavy tails and outliers.** A robust scale, ``1.4826 · MAD`` of the within-day residuals
  (Hampel 1974; the constant makes it consistent for the normal sd), against the classical
  within-day sd; the share of rows beyond 4 robust sd (``2 Φ(-4) = 6.3e-5`` for normal rows)
  with its binomial p-value.

Also kept: each fit day's *day spread* (mean absolute deviation of the day's residuals from the
day's median, see :func:`day_spread`) as the reference of the robust spread test, and the share
of the fit window's own rows inside their intervals.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from monitor.stats import tails
from monitor.stats.moments import DayMoments, day_slopes
from monitor.stats.window_summary import (
    MAD_TO_SD,
    RHYTHM_ALPHA,
    RHYTHM_MIN_DAYS,
    SLOPE_ROW_RULE,
    TAIL_SDS,
    FitDiagnosis,
    StatTest,
)

FloatArray = NDArray[np.float64]
def ljung_box(u: ArrayLike, lags: int) -> tuple[FloatArray, StatTest]:
    """Autocorrelations ``r_1..r_m`` of ``u`` and the Ljung–Box test on ``m = lags`` of them."""
    x = np.asarray(u, dtype=np.float64)
    g = len(x)
    if lags < 1 or g <= lags + 1:
        return np.zeros(0), StatTest()
    c = x - x.mean()
    denom = float(c @ c)
    if denom <= 0:
        return np.zeros(lags), StatTest()
    r = np.array([float(c[:-lag] @ c[lag:]) / denom for lag in range(1, lags + 1)])
    q = float(g * (g + 2) * np.sum(r**2 / (g - np.arange(1, lags + 1))))
    return r, StatTest(q, (float(lags),), float(tails.chi2_sf(q, lags)))


def default_lags(days: int) -> int:
    """``min(10, G // 5)`` lags (common practice, no source; at least 1)."""
    return max(1, min(10, days // 5))


def weekday_anova(u: ArrayLike, weekdays: ArrayLike) -> StatTest:
    """One-way ANOVA F of ``u`` grouped by weekday (0 = Monday)."""
    x = np.asarray(u, dtype=np.float64)
    wd = np.asarray(weekdays, dtype=np.int64)
    groups = [x[wd == w] for w in range(7) if (wd == w).any()]
    n_groups, total = len(groups), len(x)
    if n_groups < 2 or total <= n_groups:
        return StatTest()
    grand = x.mean()
    ssb = sum(len(g) * (g.mean() - grand) ** 2 for g in groups)
    ssw = sum(float(((g - g.mean()) ** 2).sum()) for g in groups)
    df1, df2 = n_groups - 1, total - n_groups
    if ssw <= 0:
        return StatTest()
    f = float((ssb / df1) / (ssw / df2))
    return StatTest(f, (float(df1), float(df2)), float(tails.f_sf(f, df1, df2)))


def koenker_breusch_pagan(resid: ArrayLike, x: ArrayLike) -> StatTest:
    """``N R²`` of ``resid²`` on ``(1, x)``: chi-square with ``k`` df (Koenker 1981)."""
    e2 = np.asarray(resid, dtype=np.float64) ** 2
    xm = np.asarray(x, dtype=np.float64)
    xm = xm.reshape(len(e2), -1)
    n, k = xm.shape
    if n <= k + 1:
        return StatTest()
    design = np.column_stack([np.ones(n), xm])
    coef, *_ = np.linalg.lstsq(design, e2, rcond=None)
    fitted = design @ coef
    tss = float(((e2 - e2.mean()) ** 2).sum())
    if tss <= 0:
        return StatTest()
    r2 = 1.0 - float(((e2 - fitted) ** 2).sum()) / tss
    lm = n * r2
    return StatTest(lm, (float(k),), float(tails.chi2_sf(lm, k)))


def day_spread(resid: ArrayLike) -> float | None:
    """A day's spread: ``log`` of the mean absolute deviation of its residuals from their
    median, times ``sqrt(n / (n - 1))`` to take out most of the small-day bias; None below two
    rows. Absolute deviations from the median keep a spread comparison's level under heavy tails
    (Brown & Forsythe 1974, *JASA* 69, 364-367); the logarithm makes day values near-symmetric.
    """
    r = np.asarray(resid, dtype=np.float64)
    n = len(r)
    if n < 2:
        return None
    mad = float(np.mean(np.abs(r - np.median(r)))) * math.sqrt(n / (n - 1))
    return math.log(mad) if mad > 0 else None


def diagnose(resid: ArrayLike, day_index: ArrayLike, weekdays: ArrayLike, x: ArrayLike,
             tau2: float, sigma_w2: float, covered_share: float,
             lags: int | None = None, *,
             slope_row_rule: str = SLOPE_ROW_RULE) -> FitDiagnosis:
    """The fit window's diagnosis from its residuals.

    ``day_index[i]`` numbers the day of row ``i`` (0, 1, ... in day order, days with rows only)
    and ``weekdays[g]`` is the weekday (0 = Monday) of day ``g``.
    """
    r = np.asarray(resid, dtype=np.float64)
    idx = np.asarray(day_index, dtype=np.int64)
    xm = np.asarray(x, dtype=np.float64).reshape(len(r), -1)
    g = int(idx.max()) + 1 if len(idx) else 0
    counts = np.bincount(idx, minlength=g).astype(np.float64)
    means = np.bincount(idx, weights=r, minlength=g) / np.maximum(counts, 1)
    u = means / np.sqrt(tau2 + sigma_w2 / np.maximum(counts, 1))
    wd = np.asarray(weekdays, dtype=np.int64)
    effects: list[float | None] = []
    for w in range(7):
        on = wd == w
        effects.append(float(means[on].mean() - means.mean()) if on.any() else None)
    weekday_test = weekday_anova(u, wd)
    per_weekday = [int((wd == w).sum()) for w in range(7)]
    if weekday_test.significant(RHYTHM_ALPHA) and \
            min(c for c in per_weekday if c > 0) >= RHYTHM_MIN_DAYS:
        # the charts measure against the rhythm, so persistence is judged net of it too: a
        # weekday pattern would otherwise bias the lag-1 correlation (Saturday low, Monday
        # high makes neighbours look opposed) and hide a persistence the charts must allow for
        offsets = np.array([0.0 if e is None else e for e in effects])
        u = (means - offsets[wd]) / np.sqrt(tau2 + sigma_w2 / np.maximum(counts, 1))
    rs, lb = ljung_box(u, lags or default_lags(g))
    within = r - means[idx]
    scaled = within * np.sqrt(counts[idx] / np.maximum(counts[idx] - 1, 1))
    robust = MAD_TO_SD * float(np.median(np.abs(scaled - np.median(scaled))))
    beyond = int((np.abs(scaled - np.median(scaled)) > TAIL_SDS * robust).sum()) if robust > 0 \
        else 0
    p_tail = 2.0 * float(tails.norm_sf(TAIL_SDS))
    tail_p = float(tails.binom_sf(beyond - 1, len(r), p_tail)) if len(r) else float("nan")
    order = np.argsort(idx, kind="stable")
    spreads: list[float] = []
    for part in np.split(r[order], np.cumsum(counts.astype(np.int64))[:-1]):
        value = day_spread(part)
        if value is not None:
            spreads.append(value)
    centred_x = xm - (np.stack([np.bincount(idx, weights=xm[:, j], minlength=g)
                                for j in range(xm.shape[1])], axis=1)
                      / np.maximum(counts, 1)[:, None])[idx]
    noise_ratio = slope_noise_ratio(centred_x, within, sigma_w2,
                                    TAIL_SDS * robust if robust > 0 else np.inf,
                                    day_index=idx, rule=slope_row_rule)
    return FitDiagnosis(
        days=g, persistence=float(rs[0]) if len(rs) else float("nan"), persistence_test=lb,
        weekday_test=weekday_test, weekday_effects=tuple(effects),
        spread_x_test=koenker_breusch_pagan(within, x),
        classical_sd=math.sqrt(sigma_w2), robust_sd=robust,
        tail_share=beyond / len(r) if len(r) else float("nan"), tail_pvalue=tail_p,
        fit_coverage=covered_share, day_spreads=tuple(spreads),
        weekday_days=tuple(per_weekday),
        slope_noise_ratio=noise_ratio,
        slope_noise_ratio_raw=slope_noise_ratio(centred_x, within, sigma_w2, np.inf),
        slope_clip_shift=(guarded_slope_shift(centred_x, within, idx, TAIL_SDS * robust,
                                              slope_row_rule) if robust > 0 else ()),
        slope_row_rule=slope_row_rule,
        slope_between_var=(guarded_between_day_variance(
            centred_x, within, idx, TAIL_SDS * robust, sigma_w2, noise_ratio, slope_row_rule)
            if robust > 0 and noise_ratio else ()))


def _beside_day_line(centred_x: FloatArray, within: FloatArray, day_index: NDArray[np.int64],
                     sxx: FloatArray) -> tuple[FloatArray, FloatArray]:
    """The rows' residuals around the pooled within line, ``u = w - x~'D`` with ``D = (Σ
    x~x~')⁻¹ Σ x~ w``, and the same with each day's median taken out, ``u - med_d u``. The
    second are what :func:`monitor.stats.within_slope.slope_step` measures a day's rows by
    (their day's raw residuals around the fit window's within slopes, less their median: the
    day's level drops out of both)."""
    u = within - centred_x @ np.linalg.solve(sxx, centred_x.T @ within)
    counts = np.bincount(day_index)
    # each day's median by partition (np.median) over the rows grouped by a stable sort of the
    # day index: ten times faster than sorting all rows by (day, u) at 30 000 rows a day
    parts = np.split(u[np.argsort(day_index, kind="stable")], np.cumsum(counts)[:-1])
    median = np.array([np.median(part) if len(part) else 0.0 for part in parts])
    return u, u - median[day_index]


def _recentred(centred_x: FloatArray, day_index: NDArray[np.int64],
               keep: NDArray[np.bool_]) -> FloatArray:
    """The kept rows' predictors centred on their own day's kept rows."""
    g = int(day_index.max()) + 1
    kept = np.bincount(day_index[keep], minlength=g)
    means = np.stack([np.bincount(day_index[keep], weights=centred_x[keep, j], minlength=g)
                      for j in range(centred_x.shape[1])], axis=1) / np.maximum(kept, 1)[:, None]
    return (centred_x - means[day_index])[keep]


def _guarded_inputs(centred_x: ArrayLike, within: ArrayLike, day_index: ArrayLike
                    ) -> tuple[FloatArray, NDArray[np.int64], FloatArray, FloatArray,
                               FloatArray] | None:
    """``(x~, day index, Σ x~x~', u, e)`` of :func:`_beside_day_line` for the guarded
    estimates below; None without rows or when the predictors do not pin down the line."""
    xc = np.asarray(centred_x, dtype=np.float64)
    w = np.asarray(within, dtype=np.float64)
    idx = np.asarray(day_index, dtype=np.int64)
    if len(w) == 0:
        return None
    xc = xc.reshape(len(w), -1)
    sxx = xc.T @ xc
    if np.linalg.cond(sxx) > 1e12:
        return None
    u, e = _beside_day_line(xc, w, idx, sxx)
    return xc, idx, sxx, u, e


def guarded_slope_shift(centred_x: ArrayLike, within: ArrayLike, day_index: ArrayLike,
                        bound: float, rule: str = SLOPE_ROW_RULE) -> tuple[float, ...]:
    """How far the pooled within-day slopes move when each day's rows are guarded as the
    within-day slope chart guards them (:func:`monitor.stats.within_slope.slope_step`): rows
    further than ``bound`` from their day's line left out (``rule="drop"``) or pulled in to it
    (``"clip"``, winsorized).

    With ``x~`` the predictors and ``w`` the residuals centred within their day, the within
    slopes lie ``D = (Σ x~x~')⁻¹ Σ x~ w`` from the line's, and ``e = u - med_d u`` are the rows'
    residuals around the within line with each day's median taken out
    (:func:`_beside_day_line`). Clipped: the pooled slopes of the clipped rows lie
    ``(Σ x~x~')⁻¹ Σ x~ clip(e, ±bound)`` from the within slopes. Dropped: the kept rows' own
    pooled within slopes, ``(Σ x°x°')⁻¹ Σ x° u`` over the rows with ``|e| <= bound``, ``x°``
    centred on the kept rows of their day, lie that far. Both are 0 when no row is beyond the
    bound (``Σ x~ u = 0``). Symmetric rows are guarded alike on both sides and the shift is nil;
    rows with a long right tail whose scatter grows with a predictor lose more where it is
    large, and the guarded slopes lie below the raw ones. The chart's days are guarded, so
    their reference must be too, or the chart would read that gap as a change (common
    practice, no source: compare an estimator with its own expectation)."""
    found = _guarded_inputs(centred_x, within, day_index)
    if found is None:
        return ()
    xc, idx, sxx, u, e = found
    if rule == "clip":
        return tuple(float(v) for v in np.linalg.solve(sxx, xc.T @ np.clip(e, -bound, bound)))
    keep = np.abs(e) <= bound
    kept_x = _recentred(xc, idx, keep)
    kept_sxx = kept_x.T @ kept_x
    if np.linalg.cond(kept_sxx) > 1e12:
        return ()
    return tuple(float(v) for v in np.linalg.solve(kept_sxx, kept_x.T @ u[keep]))


def guarded_between_day_variance(centred_x: ArrayLike, within: ArrayLike, day_index: ArrayLike,
                                 bound: float, sigma_w2: float, noise_ratio: tuple[float, ...],
                                 rule: str = SLOPE_ROW_RULE) -> tuple[float, ...]:
    """Per predictor, the between-day variance of the fit window's day slopes of rows guarded
    as the within-day slope chart guards a day's (:func:`guarded_slope_shift` says how): the
    DerSimonian–Laird estimate (:func:`between_day_variance`) over the days that pin down a
    slope, each day's within variance ``c_j sigma_w² (Sxx_d⁻¹)_jj`` with ``c_j`` the guarded
    rows' ``noise_ratio`` (:func:`slope_noise_ratio`).

    The chart measures guarded day slopes against ``c_j sigma_w² (Sxx_d⁻¹)_jj + tau_j²``, so
    ``tau_j²`` is estimated from guarded day slopes too (common practice, no source: estimate a
    variance component from the data it describes). From the raw day slopes a few breakdowns
    at the edge of a day's range make the slopes scatter with heavy tails; the estimate, cut at
    zero, then comes out high (``tests/benchmarks/results/departures_between.md``) and widens
    every day's variance, which slows the chart. Empty when no day pins down a slope."""
    guarded = _guarded_inputs(centred_x, within, day_index) if sigma_w2 > 0 else None
    if guarded is None or len(noise_ratio) != guarded[0].shape[1]:
        return ()
    xc, idx, _, u, e = guarded
    k = xc.shape[1]
    if rule == "clip":
        rows, labels = np.column_stack([xc, np.clip(e, -bound, bound)]), idx
    else:
        keep = np.abs(e) <= bound
        rows, labels = np.column_stack([xc[keep], u[keep]]), idx[keep]
    days = DayMoments.from_rows(labels, rows)
    found = day_slopes(days.comoment, days.n, np.zeros(k))
    if int(found.usable.sum()) < 3:
        return ()
    dev, unit = found.deviation[found.usable], found.unit[found.usable]
    return tuple(between_day_variance(dev[:, j], noise_ratio[j] * sigma_w2 * unit[:, j])
                 for j in range(k))


def between_day_variance(deviation: FloatArray, variance: FloatArray) -> float:
    """DerSimonian–Laird moment estimate of the between-day variance of one slope.

    With weights ``w_d = 1/variance_d`` and the weighted mean ``m`` of the deviations,
    ``Q = Σ w_d (dev_d - m)²`` and ``tau² = max(0, (Q - (G - 1)) / (Σw - Σw²/Σw))``.
    """
    w = 1.0 / np.asarray(variance, dtype=np.float64)
    d = np.asarray(deviation, dtype=np.float64)
    if len(d) < 3:
        return 0.0
    m = float(np.sum(w * d) / np.sum(w))
    q = float(np.sum(w * (d - m) ** 2))
    denom = float(np.sum(w) - np.sum(w**2) / np.sum(w))
    return max(0.0, (q - (len(d) - 1)) / denom) if denom > 0 else 0.0


def slope_noise_ratio(centred_x: ArrayLike, within: ArrayLike, sigma_w2: float,
                      bound: float, *, day_index: ArrayLike | None = None,
                      rule: str = "clip") -> tuple[float, ...]:
    """Per predictor, ``Σ x~² w_g² / (sigma_w² Σ x~²)`` over rows with predictors ``x~`` and
    residuals ``w`` centred within their day, ``w_g`` the residuals guarded as the within-day
    slope chart guards them: the ratio of White's (1980) heteroscedasticity-consistent variance
    of a within-day slope to the classical one. ``rule="clip"``: residuals clipped to
    ``±bound``; ``"drop"`` (``day_index`` needed): the sums run over the rows within ``bound``
    of their day's line (:func:`_beside_day_line`), ``x~`` centred on those rows. About 1 for
    normal rows whose scatter does not change with the predictors; above 1 when the scatter
    grows away from the day's mean predictor; below 1 for heavy-tailed rows."""
    xc = np.asarray(centred_x, dtype=np.float64)
    w = np.asarray(within, dtype=np.float64)
    xc = xc.reshape(len(w), -1)
    if rule == "drop" and np.isfinite(bound) and len(w):
        idx = np.asarray(day_index, dtype=np.int64)
        sxx_all = xc.T @ xc
        if np.linalg.cond(sxx_all) > 1e12:
            return ()
        keep = np.abs(_beside_day_line(xc, w, idx, sxx_all)[1]) <= bound
        xc, w2 = _recentred(xc, idx, keep), w[keep] ** 2
    else:
        w2 = np.clip(w, -bound, bound) ** 2
    sxx = (xc**2).sum(axis=0)
    if not sigma_w2 > 0 or np.any(sxx <= 0):
        return ()
    return tuple(float(v) for v in ((xc**2 * w2[:, None]).sum(axis=0) / (sigma_w2 * sxx)))


@dataclass(frozen=True)
class RobustSpreadTest:
    """Recent day spreads against the fit window's: a t test on the log day spreads."""

    ratio: float  # exp(mean recent - mean fit): the typical day's spread, relative
    statistic: float
    df: float
    pvalue: float  # H1: spread grew
    pvalue_narrower: float


def robust_spread_test(recent: ArrayLike, reference: ArrayLike) -> RobustSpreadTest | None:
    """Is the mean of the recent log day spreads above the fit window's?

    ``t = (mean_r - mean_f) / (s_f sqrt(1/n_r + 1/n_f))`` on ``n_f - 1`` degrees of freedom: the
    recent days are judged as new draws from the fit window's day-spread distribution, whose
    sd ``s_f`` the fit window estimates (the t statistic for the mean of new observations from
    a normal sample; any textbook on prediction intervals, common practice, no source). Days
    are the units, so heavy-tailed rows and within-day dependence do not bias it, and a window
    of only a few recent days still has an honest variance. None without a recent day or with
    fewer than 3 fit days.
    """
    a = np.asarray(recent, dtype=np.float64)
    b = np.asarray(reference, dtype=np.float64)
    if len(a) < 1 or len(b) < 3:
        return None
    sd = float(b.std(ddof=1))
    if sd <= 0:
        return None
    diff = float(a.mean() - b.mean())
    t = diff / (sd * math.sqrt(1 / len(a) + 1 / len(b)))
    df = float(len(b) - 1)
    return RobustSpreadTest(float(math.exp(diff)), t, df, float(tails.t_sf(t, df)),
                            float(tails.t_cdf(t, df)))
