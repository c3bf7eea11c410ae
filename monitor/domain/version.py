"""Versions of a model: the fitted line a planner predicts with, and what the monitor knows of
the process it was fitted on.

A :class:`VersionDraft` is what a fit or an import produces; storing it gives a :class:`Version`
(its number, state and the days it scores). Both are plain typed values with no SQL; the store
turns them into rows and back in one place (``monitor.store.versions``). A :class:`VersionSheet`
is what the views show of a version: its plain parts without the arrays and day statistics a
check needs, so ``model show`` reads it without numpy (``monitor.store.version_sheets``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, replace
from datetime import date, datetime
from enum import StrEnum
from typing import TYPE_CHECKING

from monitor.domain.version_state import VersionState
from monitor.stats.window_summary import DayEffects, FitDiagnosis

if TYPE_CHECKING:  # the views that show versions (status, model show) load none of these
    import numpy as np
    from numpy.typing import NDArray

    from monitor.stats.calibration import Calibration
    from monitor.stats.moments import DayMoments
    from monitor.stats.prediction import PredictionModel

    FloatArray = NDArray[np.float64]


class VersionSource(StrEnum):
    FIT = "fit"
    IMPORT = "import"


@dataclass(frozen=True, eq=False)
class Line:
    """The fitted line: coefficients and everything a prediction interval needs."""

    terms: tuple[str, ...]  # "intercept", then the predictors
    coefficients: FloatArray
    s: float
    dof: int
    level: float  # the interval level the version was fitted for
    n: int | None = None
    std_errors: FloatArray | None = None
    covariance: FloatArray | None = None
    xmean: FloatArray | None = None
    slope_inverse: FloatArray | None = None  # (centred X'X of the predictors)^-1
    x_min: FloatArray | None = None
    x_max: FloatArray | None = None
    r_squared: float | None = None
    adj_r_squared: float | None = None
    condition_number: float | None = None
    tvalues: tuple[float, ...] | None = None
    pvalues: tuple[float, ...] | None = None

    @property
    def k(self) -> int:
        return len(self.terms) - 1

    def prediction_model(self) -> PredictionModel:
        import numpy as np

        from monitor.stats.prediction import PredictionModel  # where a day is scored

        k = self.k
        lo = self.x_min if self.x_min is not None else np.full(k, -np.inf)
        hi = self.x_max if self.x_max is not None else np.full(k, np.inf)
        if self.slope_inverse is not None and self.xmean is not None and self.n:
            return PredictionModel(self.terms, self.coefficients, self.s, self.dof, self.n,
                                   self.xmean, self.slope_inverse, lo, hi)
        return PredictionModel.from_covariance(self.terms, self.coefficients, self.s, self.dof,
                                               self.covariance, lo, hi)

    def figures(self) -> LineFigures:
        """What a view shows of this line."""
        return LineFigures(
            terms=self.terms, coefficients=_plain(self.coefficients), s=self.s, dof=self.dof,
            level=self.level, n=self.n,
            std_errors=None if self.std_errors is None else _plain(self.std_errors),
            x_min=None if self.x_min is None else _plain(self.x_min),
            x_max=None if self.x_max is None else _plain(self.x_max),
            r_squared=self.r_squared, adj_r_squared=self.adj_r_squared,
            condition_number=self.condition_number)


def _plain(values: FloatArray) -> tuple[float | None, ...]:
    """Floats as they are stored: None where a value is not finite."""
    return tuple(float(v) if math.isfinite(v) else None for v in values)


@dataclass(frozen=True)
class LineFigures:
    """What a view shows of a fitted line: plain numbers, None where a value is not finite
    (as stored), and no covariance or centring (which only a check needs)."""

    terms: tuple[str, ...]
    coefficients: tuple[float | None, ...]
    s: float
    dof: int
    level: float
    n: int | None = None
    std_errors: tuple[float | None, ...] | None = None
    x_min: tuple[float | None, ...] | None = None
    x_max: tuple[float | None, ...] | None = None
    r_squared: float | None = None
    adj_r_squared: float | None = None
    condition_number: float | None = None

    def coefficient_map(self, values: tuple[float | None, ...] | None = None
                        ) -> dict[str, float | None]:
        """``{term: value}`` for the coefficients (or other values in the same order)."""
        return dict(zip(self.terms, self.coefficients if values is None else values,
                        strict=True))


@dataclass(frozen=True)
class ChartCalibration:
    """The bias chart's decision interval and what it promises (the stored form of
    :class:`monitor.stats.calibration.Calibration`, without the bootstrap draws)."""

    k: float
    target_arl: float
    guarantee: float
    h: float
    h_known: float  # the limit exact parameters would need
    arl_known: float  # the ARL that ``h`` gives with exact parameters
    draws: int
    seed: int
    calibrated: bool
    reason: str = ""
    learn_until: int = 0  # self-starting until this many days (0: a fixed reference)

    @classmethod
    def of(cls, c: Calibration) -> ChartCalibration:
        return cls(k=c.k, target_arl=c.target_arl, guarantee=c.guarantee, h=c.h,
                   h_known=c.h_known, arl_known=c.arl_known, draws=c.draws, seed=c.seed,
                   calibrated=c.calibrated, reason=c.reason, learn_until=c.learn_until)

    def matches(self, k: float, target_arl: float, guarantee: float,
                learn_until: int = 0) -> bool:
        """Whether this calibration was made for these settings (``learn_until``: the
        self-starting length the chart should have, 0 for a fixed reference)."""
        return ((self.k, self.target_arl, self.guarantee, self.learn_until)
                == (k, target_arl, guarantee, learn_until))


@dataclass(frozen=True)
class SlopeLimits:
    """The within-day slope chart's decision intervals, solved once when the version is
    fitted (a root search per predictor, the costliest part of building a version's check
    context) and stored with it for the settings they were solved for."""

    step: float  # check.slope_chart_step
    target_arl: float  # check.slope_chart_arl_days
    guarantee: float
    h: tuple[float | None, ...]  # each lane's; None: no finite limit (inf)
    small_step: float = 0.0  # check.slope_chart_small_step (0: versions fitted before lanes)
    reference: str = "fixed"  # check.slope_chart_reference

    def matches(self, step: float, target_arl: float, guarantee: float,
                small_step: float, reference: str) -> bool:
        return ((self.step, self.target_arl, self.guarantee, self.small_step, self.reference)
                == (step, target_arl, guarantee, small_step, reference))

    def array(self) -> FloatArray:
        import numpy as np

        return np.array([np.inf if h is None else h for h in self.h], dtype=np.float64)


@dataclass(frozen=True, eq=False)
class BaselineFigures:
    """The plain part of a :class:`Baseline`, which the views show: the variance components of
    the fit window's residuals, the charts' limits and the window's departures, without its
    day statistics."""

    tau2: float | None = None
    sigma_w2: float | None = None
    dispersion: float | None = None
    day_effects: DayEffects | None = None
    calibration: ChartCalibration | None = None
    fit_days: int | None = None  # days with rows in the fit window
    diagnosis: FitDiagnosis | None = None  # the fit window's departures (None: imported)
    slope_limits: SlopeLimits | None = None  # None: solved when the check context is built


@dataclass(frozen=True, eq=False)
class Baseline(BaselineFigures):
    """What the fit window says about the in-control process; the charts are calibrated on it.

    ``reference`` holds the fit window's day statistics (None for an imported version, whose
    window is not in the database); ``day_effects`` the variance components of its residuals.
    """

    reference: DayMoments | None = None

    def calibrated(self, calibration: Calibration) -> Baseline:
        return replace(self, calibration=ChartCalibration.of(calibration))

    def figures(self) -> BaselineFigures:
        """What a view shows of this baseline."""
        return BaselineFigures(**{f.name: getattr(self, f.name)
                                  for f in fields(BaselineFigures)})


@dataclass(frozen=True, eq=False)
class VersionDraft:
    """A version before it is stored: the fit (or import) and its window."""

    source: VersionSource
    line: Line
    baseline: Baseline
    fit_start: date | None = None
    fit_end: date | None = None
    note: str | None = None
    notes: tuple[str, ...] = ()  # caveats found while importing (missing covariance, ...)
    imported_from: str | None = None

    @property
    def cusum_h(self) -> float | None:
        c = self.baseline.calibration
        return c.h if c else None


@dataclass(frozen=True, eq=False)
class Version:
    """A stored version: the draft, its number, its state and the run of days it scores."""

    id: int
    model_id: int
    number: int
    state: VersionState
    draft: VersionDraft
    active_from: date | None
    active_until: date | None
    created_at: datetime
    created_by: str | None = None

    # what most callers read ------------------------------------------------------------
    @property
    def line(self) -> Line:
        return self.draft.line

    @property
    def baseline(self) -> Baseline:
        return self.draft.baseline

    @property
    def source(self) -> VersionSource:
        return self.draft.source

    @property
    def fit_start(self) -> date | None:
        return self.draft.fit_start

    @property
    def fit_end(self) -> date | None:
        return self.draft.fit_end

    @property
    def note(self) -> str | None:
        return self.draft.note

    @property
    def terms(self) -> tuple[str, ...]:
        return self.line.terms

    @property
    def coefficients(self) -> FloatArray:
        return self.line.coefficients

    @property
    def level(self) -> float:
        return self.line.level

    @property
    def k(self) -> int:
        return self.line.k

    @property
    def cusum_h(self) -> float | None:
        return self.draft.cusum_h

    def prediction_model(self) -> PredictionModel:
        return self.line.prediction_model()

    def scores_day(self, day: date) -> bool:
        if self.active_from is None or day < self.active_from:
            return False
        return self.active_until is None or day <= self.active_until

    def with_slope_limits(self, limits: SlopeLimits) -> Version:
        """This version with other stored slope-chart limits (solved for other settings)."""
        return replace(self, draft=replace(self.draft, baseline=replace(
            self.baseline, slope_limits=limits)))

    def copied(self, note: str) -> VersionDraft:
        """This version's fit as a new draft (a rollback stores such a copy)."""
        return replace(self.draft, note=note)

    def sheet(self) -> VersionSheet:
        """What the views show of this version."""
        draft = self.draft
        return VersionSheet(
            id=self.id, number=self.number, state=self.state, source=draft.source,
            line=self.line.figures(), baseline=self.baseline.figures(),
            fit_start=draft.fit_start, fit_end=draft.fit_end, active_from=self.active_from,
            active_until=self.active_until, note=draft.note, notes=draft.notes,
            created_at=self.created_at, created_by=self.created_by)


@dataclass(frozen=True, eq=False)
class VersionSheet:
    """What the views show of a version (``model show``, the documents of ``model fit``,
    ``refit``, ``compare`` and ``replay``, the model's page): its number and days, the line's
    figures and the baseline's, without the fit window's day statistics. :meth:`Version.sheet`
    gives it for a version in memory; ``monitor.store.version_sheets`` reads it from the columns
    without decoding the arrays."""

    id: int
    number: int
    state: VersionState
    source: VersionSource
    line: LineFigures
    baseline: BaselineFigures
    fit_start: date | None
    fit_end: date | None
    active_from: date | None
    active_until: date | None
    note: str | None
    notes: tuple[str, ...]
    created_at: datetime
    created_by: str | None
