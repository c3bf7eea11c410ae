"""What the fit window's residuals say, kept with each version: the variance components of its
day shocks (:class:`DayEffects`, estimated by :mod:`monitor.stats.day_effects`) and its departures
from the textbook model (:class:`FitDiagnosis`, tested by :mod:`monitor.stats.diagnosis`).

Plain values without numpy, so the views that show a version (``model show``, the version
documents) decode them without loading the statistics that produce them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from statistics import NormalDist


@dataclass(frozen=True)
class DayEffects:
    """Variance components of residuals grouped by day."""

    tau2: float
    sigma_w2: float
    n_days: int
    n_rows: int
    n0: float
    ms_between: float
    ms_within: float
    statistic: float
    pvalue: float

    @property
    def df_between(self) -> int:
        return self.n_days - 1

    @property
    def df_within(self) -> int:
        return self.n_rows - self.n_days

    @property
    def intraday_correlation(self) -> float:
        total = self.tau2 + self.sigma_w2
        return self.tau2 / total if total > 0 else float("nan")

    def present(self, alpha: float = 0.05) -> bool:
        """Whether the F test rejects ``tau² = 0`` at ``alpha`` (and the estimate is positive)."""
        return bool(self.tau2 > 0 and self.pvalue < alpha)


TAIL_SDS = 4.0  # rows beyond this many robust sd count as outliers
# How the within-day slope chart treats a row beyond TAIL_SDS robust sd of its day's line:
# "drop" leaves it out of the day's slope (versions fitted now), "clip" counts it at the bound
# (winsorized; versions fitted before, whose stored ratio and shift were computed that way).
SLOPE_ROW_RULES = ("clip", "drop")
SLOPE_ROW_RULE = "drop"
MAD_TO_SD = 1.482602218505602  # 1 / Φ⁻¹(3/4): MAD → sd for normal data
MAX_PERSISTENCE = 0.9  # beyond this the AR(1) view of the day shocks is not used
PERSISTENCE_ALPHA = 0.05  # level of the persistence test that makes the chart prewhiten
TAIL_ALPHA = 0.01  # level of the tail test above which rows count as heavy-tailed
RHYTHM_ALPHA = 0.01  # level of the weekday test below which the charts measure against it
RHYTHM_MIN_DAYS = 4  # fit days each working weekday needs before its offset is subtracted


@dataclass(frozen=True)
class StatTest:
    """A test's statistic, degrees of freedom and p-value (NaN when it could not be run)."""

    statistic: float = float("nan")
    df: tuple[float, ...] = ()
    pvalue: float = float("nan")

    def significant(self, alpha: float) -> bool:
        return bool(math.isfinite(self.pvalue) and self.pvalue < alpha)


@dataclass(frozen=True)
class FitDiagnosis:
    """The fit window's departures from the textbook model (see the module text)."""

    days: int  # days with rows
    persistence: float  # lag-1 autocorrelation of the standardized day means
    persistence_test: StatTest  # Ljung–Box
    weekday_test: StatTest
    weekday_effects: tuple[float | None, ...]  # Mon..Sun mean day residual (response units)
    spread_x_test: StatTest  # Koenker–Breusch–Pagan on within-day residuals
    classical_sd: float  # within-day sd (sqrt of sigma_w²)
    robust_sd: float  # 1.4826 · MAD of the within-day residuals
    tail_share: float  # share of rows beyond TAIL_SDS robust sd
    tail_pvalue: float  # P(at least that many) for normal rows
    fit_coverage: float  # share of the fit window's rows inside their intervals
    day_spreads: tuple[float, ...]  # log day spread of each fit day with >= 2 rows
    slope_noise_ratio: tuple[float, ...] = ()  # White's meat (rows guarded) over the classical
    weekday_days: tuple[int, ...] = ()  # Mon..Sun: fit days with rows on that weekday
    slope_noise_ratio_raw: tuple[float, ...] = ()  # the same for the rows as they are
    slope_clip_shift: tuple[float, ...] = ()  # guarded rows' within slopes minus the raw ones
    slope_row_rule: str = "clip"  # how those rows were guarded (SLOPE_ROW_RULES)
    # between-day variance of the day slopes of rows so guarded (empty: versions stored before,
    # whose chart estimates it from the raw day slopes)
    slope_between_var: tuple[float, ...] = ()

    def rhythm(self, alpha: float = RHYTHM_ALPHA) -> tuple[float, ...] | None:
        """Mon..Sun offsets of the day mean residual (0 for a weekday without fit days) when the
        weekday test is significant at ``alpha`` and every weekday with rows has at least
        :data:`RHYTHM_MIN_DAYS` fit days; None otherwise (or for an older diagnosis that did
        not count the days per weekday)."""
        if not self.weekday_test.significant(alpha) or len(self.weekday_days) != 7:
            return None
        if min(d for d in self.weekday_days if d > 0) < RHYTHM_MIN_DAYS:
            return None  # offsets from fewer days would mostly fit the window's own noise
        return tuple(0.0 if v is None else float(v) for v in self.weekday_effects)

    @property
    def heavy_tails(self) -> bool:
        """More rows beyond 4 robust sd than normal rows give, at level :data:`TAIL_ALPHA`."""
        return bool(math.isfinite(self.tail_pvalue) and self.tail_pvalue < TAIL_ALPHA)

    def chart_persistence(self, alpha: float = PERSISTENCE_ALPHA) -> float:
        """The lag-1 correlation the bias chart uses: ``r1`` when it is significantly positive
        (two-sided test at ``alpha`` with its large-sample sd ``1/sqrt(G)``, Bartlett 1946),
        else 0. The Ljung–Box test is reported; it also reacts to longer lags (a weekly
        rhythm), which an AR(1) view of the shocks would not describe."""
        if self.days >= 3 and self.persistence > lag_one_cut(self.days, alpha):
            return float(min(self.persistence, MAX_PERSISTENCE))
        return 0.0


def lag_one_cut(days: int, alpha: float = PERSISTENCE_ALPHA) -> float:
    """The lag-1 autocorrelation beyond which persistence counts as significant."""
    # the standard library's normal quantile (Wichura's AS 241, full double precision) keeps
    # scipy.stats out of the commands that only show a version
    return NormalDist().inv_cdf(1 - alpha / 2) / math.sqrt(days)
