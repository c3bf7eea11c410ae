"""Scoring two versions on the same held-out days, and a paired test of which predicts better.

The comparison is by day, not by row: rows of one day share a common shock, so a row-level
paired test would overstate the evidence just as a row-level coverage test does. Each day
contributes the difference of the two versions' mean squared errors on that day's rows, and the
test is a one-sample t test on those day differences, the form of Diebold & Mariano (1995) with
days as the independent units.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from monitor.stats import tails
from monitor.stats.coverage import CoverageTest, coverage_test
from monitor.stats.prediction import PredictionModel

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class HoldoutScore:
    """How one version did on the held-out rows."""

    n: int
    days: int
    coverage: CoverageTest
    bias: float  # mean of y - prediction, in the response's units
    rmse: float
    mean_abs_error: float
    mean_width: float  # mean prediction interval width

    def as_dict(self) -> dict[str, float | int]:
        c = self.coverage
        return {"n": self.n, "days": self.days, "covered": c.covered, "coverage": c.coverage,
                "wilson_low": c.wilson_low, "wilson_high": c.wilson_high,
                "coverage_pvalue_low": c.pvalue_low, "bias": self.bias, "rmse": self.rmse,
                "mean_abs_error": self.mean_abs_error, "mean_width": self.mean_width}


@dataclass(frozen=True)
class LossDifference:
    """Day-blocked paired test: are the second version's squared errors smaller?"""

    statistic: float
    pvalue: float  # one-sided, H1: the second version's mean squared error is smaller
    df: int
    mean_difference: float  # mean over days of (MSE first - MSE second)


def holdout_score(model: PredictionModel, x: ArrayLike, y: ArrayLike, days: ArrayLike,
                  level: float, dispersion: float = 1.0) -> HoldoutScore:
    """Coverage, bias and error size of ``model`` on rows ``(x, y)`` stamped with ``days``."""
    scores = model.score(x, y, level)
    residual = np.asarray(y, dtype=np.float64) - scores.predicted
    n = scores.n
    if n == 0:
        nan = float("nan")
        return HoldoutScore(0, 0, coverage_test(0, 0, level), nan, nan, nan, nan)
    return HoldoutScore(
        n=n, days=len(np.unique(np.asarray(days))),
        coverage=coverage_test(scores.covered, n, level, max(1.0, dispersion)),
        bias=float(residual.mean()), rmse=float(np.sqrt(np.mean(residual**2))),
        mean_abs_error=float(np.mean(np.abs(residual))),
        mean_width=float(np.mean(scores.upper - scores.lower)))


def loss_difference_test(days: ArrayLike, errors_first: ArrayLike,
                         errors_second: ArrayLike) -> LossDifference:
    """Paired test on day mean squared errors (Diebold & Mariano 1995, days as blocks)."""
    first = np.asarray(errors_first, dtype=np.float64)
    second = np.asarray(errors_second, dtype=np.float64)
    if first.shape != second.shape or first.ndim != 1:
        raise ValueError("both versions need one error per held-out row")
    uniq, index = np.unique(np.asarray(days), return_inverse=True)
    if len(index) != len(first):
        raise ValueError("each held-out row needs its day")
    counts = np.bincount(index, minlength=len(uniq)).astype(np.float64)
    per_day = np.bincount(index, weights=first**2 - second**2, minlength=len(uniq)) / counts
    m = len(per_day)
    if m < 2:
        return LossDifference(float("nan"), float("nan"), max(m - 1, 0),
                              float(per_day.mean()) if m else float("nan"))
    mean = float(per_day.mean())
    sd = float(per_day.std(ddof=1))
    if sd == 0.0:
        statistic = float("inf") if mean > 0 else float("-inf") if mean < 0 else float("nan")
    else:
        statistic = mean / (sd / np.sqrt(m))
    return LossDifference(float(statistic), float(tails.t_sf(statistic, m - 1)), m - 1, mean)
