"""Series for the charts, prepared from stored records without drawing anything.

Every chart of the report and of the alert e-mail draws one of these frozen objects; tests check
them against the stored day checks and against an independent fit, with no image involved.
Calendar days without a check, or checked with no rows, are NaN: a chart shows a gap there,
never a zero.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date, timedelta

import numpy as np

from monitor.domain.check import DayCheck
from monitor.domain.version import Version
from monitor.store.observations import Observations

GRID_POINTS = 121


def calendar(first: date, last: date) -> tuple[date, ...]:
    """Every calendar day from ``first`` through ``last`` (empty when ``last < first``)."""
    return tuple(first + timedelta(days=i) for i in range((last - first).days + 1))


def _by_day(checks: Sequence[DayCheck]) -> tuple[tuple[date, ...], dict[date, DayCheck]]:
    if not checks:
        return (), {}
    indexed = {c.day: c for c in checks}
    return calendar(min(indexed), max(indexed)), indexed


def _column(days: Sequence[date], indexed: dict[date, DayCheck], name: str,
            *, need_rows: bool = True) -> np.ndarray:
    values = np.full(len(days), np.nan)
    for i, day in enumerate(days):
        check = indexed.get(day)
        if check is None or (need_rows and check.n == 0):
            continue
        value = getattr(check, name)
        if value is not None:
            values[i] = float(value)
    return values


@dataclass(frozen=True)
class CoverageSeries:
    """Daily coverage and the rolling window's Wilson band, one entry per calendar day."""

    days: tuple[date, ...]
    n: np.ndarray  # scored rows per day (0 where no check row exists)
    coverage: np.ndarray  # covered / n; NaN where n == 0 or no check
    window_coverage: np.ndarray
    wilson_low: np.ndarray
    wilson_high: np.ndarray
    level: float
    window_days: int | None = None  # the rolling window's length, when known

    @property
    def empty(self) -> bool:
        return not np.isfinite(self.coverage).any()


def coverage_series(checks: Sequence[DayCheck], level: float,
                    window_days: int | None = None) -> CoverageSeries:
    days, indexed = _by_day(checks)
    n = np.array([indexed[d].n if d in indexed else 0 for d in days], dtype=float)
    return CoverageSeries(
        days=days, n=n,
        coverage=_column(days, indexed, "coverage"),
        window_coverage=_column(days, indexed, "window_coverage", need_rows=False),
        wilson_low=_column(days, indexed, "wilson_low", need_rows=False),
        wilson_high=_column(days, indexed, "wilson_high", need_rows=False),
        level=level, window_days=window_days,
    )


@dataclass(frozen=True)
class CusumSeries:
    """The two CUSUM paths (upper drawn as +, lower as −) and the decision limit h per day."""

    days: tuple[date, ...]
    upper: np.ndarray  # C+ after the day's step; NaN where the day had no rows or no check
    lower: np.ndarray  # −C− after the day's step (drawn below zero)
    h: np.ndarray
    signal: np.ndarray  # bool, the CUSUM signalled on that day

    @property
    def empty(self) -> bool:
        return not np.isfinite(self.upper).any()

    @property
    def signal_days(self) -> tuple[date, ...]:
        return tuple(d for d, s in zip(self.days, self.signal, strict=True) if s)


def cusum_series(checks: Sequence[DayCheck]) -> CusumSeries:
    days, indexed = _by_day(checks)
    upper = _column(days, indexed, "cusum_upper")
    lower = -_column(days, indexed, "cusum_lower")
    h = _column(days, indexed, "cusum_h", need_rows=False)
    signal = np.array([bool(indexed[d].cusum_signal) if d in indexed else False for d in days],
                      dtype=bool)
    return CusumSeries(days=days, upper=upper, lower=lower, h=h, signal=signal)


@dataclass(frozen=True, eq=False)
class VersionLine:
    """One version's mean line and prediction band over a grid of its (single) predictor.

    Computed with :meth:`Version.prediction_model` at the version's own level: the same
    interval the nightly check scores with.
    """

    number: int
    state: str
    level: float
    x: np.ndarray
    mean: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    fit_x_min: float | None  # the range of x in the version's fit window
    fit_x_max: float | None


def version_line(version: Version, grid: np.ndarray) -> VersionLine:
    """``version``'s line and band at the points of ``grid`` (a model with one predictor)."""
    if version.k != 1:
        raise ValueError(f"a line needs a model with one predictor; this one has {version.k}")
    model = version.prediction_model()
    xs = np.asarray(grid, dtype=float).reshape(-1, 1)
    lower, upper = model.interval(xs, version.level)
    x_min, x_max = version.line.x_min, version.line.x_max
    lo = float(x_min[0]) if x_min is not None else None
    hi = float(x_max[0]) if x_max is not None else None
    return VersionLine(version.number, version.state, version.level, xs[:, 0], model.predict(xs),
                       lower, upper, lo, hi)


@dataclass(frozen=True, eq=False)
class ScatterSeries:
    """Observed rows (first predictor against the response) and the versions' lines."""

    x: np.ndarray
    y: np.ndarray
    recent: np.ndarray  # bool: the row falls in the last coverage window
    recent_from: date
    lines: tuple[VersionLine, ...]  # the active version first, then a candidate (if any)
    x_label: str
    y_label: str
    note: str = ""  # why no line is drawn, when none is

    @property
    def empty(self) -> bool:
        return len(self.y) == 0 and not self.lines


def scatter_series(observations: Observations, versions: Sequence[Version],
                   recent_from: date, x_label: str, y_label: str) -> ScatterSeries:
    """Rows and lines for the scatter; the grid spans the rows and every version's fit range."""
    x = observations.x[:, 0] if observations.x.shape[1] else np.zeros(len(observations))
    recent = observations.days >= np.datetime64(recent_from, "D")
    lines: tuple[VersionLine, ...] = ()
    note = ""
    one_predictor = [v for v in versions if v.k == 1]
    if versions and len(one_predictor) < len(versions):
        note = ("lines are drawn for one-predictor models only; this model has "
                f"{versions[0].k} predictors, the rows are shown against the first")
    elif versions:
        ends = [x] + [np.array([v.line.x_min[0], v.line.x_max[0]]) for v in versions
                      if v.line.x_min is not None and v.line.x_max is not None
                      and np.isfinite(v.line.x_min[0]) and np.isfinite(v.line.x_max[0])]
        span = np.concatenate(ends)
        if len(span):
            grid = np.linspace(span.min(), span.max(), GRID_POINTS)
            lines = tuple(version_line(v, grid) for v in versions)
        else:
            note = "no rows and no fitted range to draw the lines over"
    return ScatterSeries(x, observations.y, recent, recent_from, lines, x_label, y_label, note)


@dataclass(frozen=True)
class Scorer:
    """A version that scored rows in the period: its number, interval level L, and the edge of
    its interval in standardized units, t(dof, (1 + L) / 2)."""

    number: int
    level: float
    limit: float


@dataclass(frozen=True, eq=False)
class ScoredRows:
    """Every stored row of a checked day, scored as the nightly check scored it: by the version
    that checked its day (the check's ``version_id``), at that version's level L, through the
    same :meth:`~monitor.stats.prediction.PredictionModel.score` call. Rows of days without a
    check are left out. Ordered by day and time, like the stored rows."""

    day: np.ndarray  # datetime64[D]
    x: np.ndarray  # (n, k) predictor values
    y: np.ndarray
    version: np.ndarray  # the number of the version that scored the row
    planned: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    z: np.ndarray  # (y - planned) / the prediction standard error
    inside: np.ndarray  # bool: inside the prediction interval
    scorers: tuple[Scorer, ...]  # the versions that scored rows here, by number

    @property
    def empty(self) -> bool:
        return len(self.y) == 0

    def __len__(self) -> int:
        return len(self.y)


def score_rows(observations: Observations, checks: Sequence[DayCheck],
               versions: Sequence[Version]) -> ScoredRows:
    """The rows of ``observations`` that fall on a checked day, each scored by its check's
    version (see :class:`ScoredRows`)."""
    by_id = {v.id: v for v in versions}
    n, k = len(observations), observations.x.shape[1]
    version = np.zeros(n, dtype=np.int64)
    planned, lower, upper, z = (np.full(n, np.nan) for _ in range(4))
    inside = np.zeros(n, dtype=bool)
    scorers = []
    for version_id in sorted({c.version_id for c in checks}):
        v = by_id[version_id]
        model = v.prediction_model()
        own = np.array([c.day for c in checks if c.version_id == version_id],
                       dtype="datetime64[D]")
        rows = np.isin(observations.days, own)
        if rows.any():
            s = model.score(observations.x[rows], observations.y[rows], v.level)
            planned[rows], lower[rows], upper[rows] = s.predicted, s.lower, s.upper
            z[rows], inside[rows], version[rows] = s.z, s.inside, v.number
            scorers.append(Scorer(v.number, v.level, model.critical_value(v.level)))
    keep = version > 0
    return ScoredRows(observations.days[keep], observations.x[keep].reshape(-1, k),
                      observations.y[keep], version[keep], planned[keep], lower[keep],
                      upper[keep], z[keep], inside[keep],
                      tuple(sorted(scorers, key=lambda s: s.number)))


@dataclass(frozen=True, eq=False)
class ResidualSeries:
    """Standardized predictive residuals of every row on a checked day, and their day means.

    Each row is scored by the version that scored its day (:func:`score_rows`); ``limit`` is
    the interval's edge in the same units, t(dof, (1 + L) / 2), so a row beyond ±limit fell
    outside its prediction interval.
    """

    days: tuple[date, ...]  # calendar days from the first to the last check
    row_day: np.ndarray  # datetime64[D] of each scored row
    z: np.ndarray
    inside: np.ndarray  # bool: inside the prediction interval
    day_mean: np.ndarray  # mean z per calendar day; NaN where no rows were scored
    limit: np.ndarray  # per calendar day; NaN where no check

    @property
    def empty(self) -> bool:
        return len(self.z) == 0


def residual_series(observations: Observations | ScoredRows, checks: Sequence[DayCheck],
                    versions: Sequence[Version]) -> ResidualSeries:
    """The residual chart's series; ``observations`` may be scored already (:func:`score_rows`
    of the same checks and versions)."""
    scored = (observations if isinstance(observations, ScoredRows)
              else score_rows(observations, checks, versions))
    days, indexed = _by_day(checks)
    by_id = {v.id: v for v in versions}
    edge = {i: by_id[i].prediction_model().critical_value(by_id[i].level)
            for i in {c.version_id for c in checks}}
    limit = np.array([edge[indexed[d].version_id] if d in indexed else np.nan for d in days],
                     dtype=float)
    day_mean = np.full(len(days), np.nan)
    if days and len(scored):
        position = (scored.day - np.datetime64(days[0], "D")).astype(int)
        counts = np.bincount(position, minlength=len(days))
        sums = np.bincount(position, weights=scored.z, minlength=len(days))
        with np.errstate(invalid="ignore", divide="ignore"):
            day_mean = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
    return ResidualSeries(days, scored.day, scored.z, scored.inside, day_mean, limit)


@dataclass(frozen=True)
class LimitShareSeries:
    """How near the bias chart and the within-day slope chart stood to their limits, each day:
    the larger CUSUM side over h, and the leading slope side over its h (1 = the limit, where
    the check advises a refit; ``watch`` = the share that puts a model on watch).

    A day without rows keeps the standing value (the charts did not move); a day whose check
    ran no slope chart is NaN there."""

    days: tuple[date, ...]
    bias: np.ndarray
    slope: np.ndarray
    watch: float

    @property
    def empty(self) -> bool:
        return not np.isfinite(self.bias).any()


def limit_share_series(checks: Sequence[DayCheck], watch: float) -> LimitShareSeries:
    days, indexed = _by_day(checks)
    bias = np.full(len(days), np.nan)
    slope = np.full(len(days), np.nan)
    for i, d in enumerate(days):
        check = indexed.get(d)
        if check is None:
            continue
        if check.cusum_h:
            bias[i] = max(check.cusum_upper, check.cusum_lower) / check.cusum_h
        chart = check.details.slope_chart
        if chart is not None and chart.h > 0:
            slope[i] = chart.value / chart.h
    return LimitShareSeries(days, bias, slope, watch)
