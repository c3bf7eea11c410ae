"""A seeded generator of operations-shaped data that departs from the textbook assumptions.

The scenario is the project's dock: minutes to load a trailer from its pallet count,

    load_minutes = 9 + 2.1·pallets (+ 1.2·mixed_pallets) + day shock + row noise,

about 100 loads a day (Poisson), pallets drawn uniformly from 4..30 each day, day shocks of sd
2.5 min and row noise of sd 5 min. Each :class:`Case` changes one thing (or three at once) and
keeps the rest; the variances are matched so that only the *shape* of the noise differs:

- AR(1) day shocks keep the marginal sd 2.5 min (innovations scaled by sqrt(1 - phi²));
- Student-t row noise is scaled to sd 5 min (t_nu has variance nu / (nu - 2));
- spread growing with x keeps the root mean square of the row sd at 5 min;
- a weekly rhythm adds fixed weekday offsets on top of the iid day shocks;
- outliers add +40 min (a breakdown) to a share of rows on top of the normal noise;
- skewed rows: lognormal noise centred to mean 0 and scaled to sd 5 min, its sd growing with
  pallets as above (a long right tail where the loads are large: durations are skewed).

A :class:`Change` alters the pallet slope from a given monitored day on (a step, or a drift
that grows a little each day). Everything else, the fitting and the day loop, is production
code; see ``sim_departures.py``.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass
from datetime import date, timedelta

import numpy as np

START = date(2025, 1, 6)  # a Monday, so that weekday offsets fall on known days
FIT_DAYS = 60
B0 = 9.0  # minutes
B1 = 2.1  # minutes per pallet
B2 = 1.2  # minutes per mixed pallet (two-predictor case)
MIXED_SHARE = 0.25  # each pallet is a mixed one with this probability
TAU = 2.5  # day shock sd, minutes
SIGMA = 5.0  # row noise sd, minutes
PALLETS = (4, 30)  # the day's pallet range at the start


@dataclass(frozen=True)
class Case:
    """How one simulated model departs from independent normal day shocks and rows."""

    name: str
    description: str
    rows: float = 100.0  # mean loads a day (Poisson)
    phi: float = 0.0  # AR(1) coefficient of the day shocks (same marginal sd)
    t_df: float | None = None  # Student-t row noise with these df (same sd)
    log_sd: float = 0.0  # lognormal row noise with this log-scale sd (centred, same sd)
    outlier_share: float = 0.0  # share of rows that are a breakdown
    outlier_minutes: float = 40.0  # what a breakdown adds
    weekly: bool = False  # Mondays +4 min, Saturdays -3 min, Sundays closed
    spread_with_x: bool = False  # row sd proportional to pallets (same root mean square)
    x_shift_per_100_days: float = 0.0  # how far the day's pallet range moves up
    two_predictors: bool = False  # a second predictor: mixed pallets
    slope_sd: float = 0.0  # sd of the day's own pallet slope around B1 (minutes per pallet)
    fit_days: int = FIT_DAYS  # the version is fitted on the last this many days before day 60

    @property
    def predictors(self) -> tuple[str, ...]:
        return ("pallets", "mixed_pallets") if self.two_predictors else ("pallets",)


WEEKDAY_OFFSETS = {0: 4.0, 5: -3.0}  # Monday: backlog after the weekend; Saturday: light loads
CLOSED_WEEKDAY = 6  # Sunday: no work, no rows

CASES: dict[str, Case] = {c.name: c for c in (
    Case("textbook", "iid normal day shocks and rows"),
    Case("ar1_0.3", "AR(1) day shocks, phi 0.3, same variance", phi=0.3),
    Case("ar1_0.5", "AR(1) day shocks, phi 0.5, same variance", phi=0.5),
    Case("ar1_0.7", "AR(1) day shocks, phi 0.7, same variance", phi=0.7),
    Case("t3", "row noise t with 3 df, same sd", t_df=3.0),
    Case("t5", "row noise t with 5 df, same sd", t_df=5.0),
    Case("outliers_0.5", "0.5 % of rows a breakdown (+40 min)", outlier_share=0.005),
    Case("outliers_2", "2 % of rows a breakdown (+40 min)", outlier_share=0.02),
    Case("weekly", "Mondays +4 min, Saturdays -3 min, Sundays closed (not in the model)",
         weekly=True),
    Case("spread_x", "row sd proportional to pallets, same average", spread_with_x=True),
    Case("skewed_spread", "lognormal rows (log sd 0.8, centred) with sd proportional to "
         "pallets", log_sd=0.8, spread_with_x=True),
    Case("x_shift", "pallet range moves up 2 every 100 days, line unchanged",
         x_shift_per_100_days=2.0),
    Case("rows_5", "5 loads a day", rows=5.0),
    Case("rows_1000", "1000 loads a day", rows=1000.0),
    Case("rows_30000", "30 000 loads a day (a sorting hub)", rows=30000.0),
    Case("hub_combined", "30 000 loads a day, AR(1) 0.5 + t4 rows + weekly rhythm + 0.5 % "
         "breakdowns", rows=30000.0, phi=0.5, t_df=4.0, weekly=True, outlier_share=0.005),
    Case("two_predictors", "pallets and mixed pallets", two_predictors=True),
    Case("random_slope", "each day its own pallet slope, sd 0.1 min/pallet", slope_sd=0.1),
    Case("combined", "AR(1) 0.5 + t4 rows + weekly rhythm", phi=0.5, t_df=4.0, weekly=True),
    Case("short_fit", "fitted on 14 days only, as a candidate promoted soon after a change",
         fit_days=14),
)}


@dataclass(frozen=True)
class Change:
    """A change of the pallet slope from monitored day ``after + 1`` on (none: in control)."""

    name: str
    step: float = 0.0  # relative step of the slope
    drift_per_day: float = 0.0  # relative slope added per day since the change
    after: int = 60  # in-control monitored days before the change

    def multiplier(self, day_index: np.ndarray) -> np.ndarray:
        """The slope factor on each absolute day index (0 = the first day of the fit window)."""
        since = day_index - (FIT_DAYS + self.after)  # 0 on the change day
        on = since >= 0
        return 1.0 + on * (self.step + self.drift_per_day * (since + 1))

    @property
    def day(self) -> date:
        """The change day (the first day the slope differs)."""
        return START + timedelta(days=FIT_DAYS + self.after)


CHANGES: dict[str, Change] = {c.name: c for c in (
    Change("step_5", step=0.05),
    Change("step_10", step=0.10),
    Change("step_20", step=0.20),
    Change("drift_0.05", drift_per_day=0.0005),
    Change("step_-5", step=-0.05),  # a slope that falls (faster work): the other direction
    Change("step_-10", step=-0.10),
    # soon after the version took over (with short_fit: a candidate fitted on two weeks and
    # promoted, then the slope moves again ten days later)
    Change("step_5_at_10", step=0.05, after=10),
    Change("step_10_at_10", step=0.10, after=10),
)}
# the changes a run walks unless told otherwise
DEFAULT_CHANGES = ("step_5", "step_10", "step_20", "drift_0.05")


@dataclass(frozen=True, eq=False)
class Sample:
    """Rows of one simulated model: each row's day, predictors (pallets first) and response."""

    days: np.ndarray  # datetime64[D], sorted
    x: np.ndarray  # (n, k)
    y: np.ndarray  # (n,)

    @property
    def fit_end(self) -> date:
        return START + timedelta(days=FIT_DAYS - 1)

    @property
    def day_index(self) -> np.ndarray:
        """Each row's day, counted from the first day of the fit window (0)."""
        return (self.days - np.datetime64(START, "D")).astype(np.int64)

    def from_day(self, index: int) -> Sample:
        """The rows from absolute day ``index`` on (0 = the first day of the 60 days)."""
        keep = self.day_index >= index
        return Sample(self.days[keep], self.x[keep], self.y[keep])

    def through(self, monitored_days: int) -> Sample:
        """The rows of the fit window and the first ``monitored_days`` monitored days."""
        keep = self.day_index < FIT_DAYS + monitored_days
        return Sample(self.days[keep], self.x[keep], self.y[keep])

    def with_change(self, change: Change) -> Sample:
        """The same rows with the pallet slope changed as ``change`` says."""
        extra = B1 * (change.multiplier(self.day_index) - 1.0) * self.x[:, 0]
        return Sample(self.days, self.x, self.y + extra)


def simulate(case: Case, model: int, monitored_days: int) -> Sample:
    """Model ``model`` of ``case``: a fit window of ``FIT_DAYS`` days, then the monitored days.

    Every day draws from its own generator, keyed by the case's name, the model's number and
    the day, so a shorter run is the beginning of a longer one. :meth:`Sample.with_change` turns
    the sample into the same world with a changed pallet slope (the days before the change are
    identical).
    """
    key = zlib.crc32(case.name.encode())
    innovation = np.sqrt(1.0 - case.phi * case.phi)
    rms = _rms_pallets()
    days = FIT_DAYS + monitored_days
    x_parts, y_parts, counts = [], [], []
    shock = 0.0
    for d in range(days):
        rng = np.random.default_rng(np.random.SeedSequence([key, model, d]))
        day = START + timedelta(days=d)
        n = int(rng.poisson(case.rows))
        e = rng.normal(0.0, TAU)
        # AR(1) day shocks started in their stationary law (phi = 0: independent shocks)
        shock = e if d == 0 else case.phi * shock + innovation * e
        slope = B1 + (rng.normal(0.0, case.slope_sd) if case.slope_sd else 0.0)
        if case.weekly and day.weekday() == CLOSED_WEEKDAY:
            n = 0
        lo = round(PALLETS[0] + case.x_shift_per_100_days * d / 100)
        pallets = (lo + rng.integers(0, PALLETS[1] - PALLETS[0] + 1, n)).astype(np.float64)
        mean = B0 + slope * pallets + shock
        if case.weekly:
            mean = mean + WEEKDAY_OFFSETS.get(day.weekday(), 0.0)
        columns = [pallets]
        if case.two_predictors:
            mixed = rng.binomial(pallets.astype(np.int64), MIXED_SHARE).astype(np.float64)
            mean = mean + B2 * mixed
            columns.append(mixed)
        noise = _row_noise(rng, n, case.t_df, case.log_sd)
        if case.spread_with_x:
            noise = noise * pallets / rms  # same root mean square sd at the starting range
        y = mean + noise
        if case.outlier_share:
            y = y + case.outlier_minutes * (rng.random(n) < case.outlier_share)
        x_parts.append(np.column_stack(columns))
        y_parts.append(y)
        counts.append(n)
    labels = np.datetime64(START, "D") + np.repeat(np.arange(days), counts)
    return Sample(labels, np.concatenate(x_parts), np.concatenate(y_parts))


def _row_noise(rng: np.random.Generator, n: int, df: float | None,
               log_sd: float = 0.0) -> np.ndarray:
    """Row noise of sd ``SIGMA``: normal, Student t or a centred lognormal scaled to it."""
    if log_sd:
        s2 = log_sd * log_sd  # lognormal: mean exp(s²/2), variance (exp(s²) - 1) exp(s²)
        raw = np.exp(rng.normal(0.0, log_sd, n)) - np.exp(s2 / 2.0)
        return SIGMA * raw / np.sqrt((np.exp(s2) - 1.0) * np.exp(s2))
    if df is None:
        return rng.normal(0.0, SIGMA, n)
    return SIGMA * np.sqrt((df - 2.0) / df) * rng.standard_t(df, n)


def _rms_pallets() -> float:
    """Root mean square of pallets uniform on the starting range."""
    values = np.arange(PALLETS[0], PALLETS[1] + 1, dtype=np.float64)
    return float(np.sqrt(np.mean(values * values)))
