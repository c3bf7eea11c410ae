"""Prediction intervals and standardized predictive residuals for new rows.

For a new row ``x0`` (intercept included) the prediction interval at level ``L`` is
``yhat0 ± t(dof, (1 + L) / 2) · s · sqrt(1 + x0ᵀ(XᵀX)⁻¹x0)`` and the standardized predictive
residual is ``z = (y0 - yhat0) / (s · sqrt(1 + x0ᵀ(XᵀX)⁻¹x0))``, which follows Student's t with
``dof`` degrees of freedom when the model holds (any regression text, e.g. Montgomery, Peck &
Vining, *Introduction to Linear Regression Analysis*, §2.5 and §3.5).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from monitor.errors import DegenerateDataError
from monitor.stats import tails
from monitor.stats.ols import INTERCEPT, OLSFit, centred_leverage

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]


@dataclass(frozen=True, eq=False)
class Scores:
    """The active version's verdict on each new row."""

    predicted: FloatArray
    lower: FloatArray
    upper: FloatArray
    z: FloatArray
    inside: BoolArray
    extrapolated: BoolArray

    @property
    def n(self) -> int:
        return len(self.predicted)

    @property
    def covered(self) -> int:
        return int(self.inside.sum())


@dataclass(frozen=True, eq=False)
class PredictionModel:
    """What scoring needs from a fitted version: coefficients, ``s``, ``dof`` and leverage.

    The leverage ``x0ᵀ(XᵀX)⁻¹x0`` is computed in centred form from ``n``, ``xmean`` and
    ``slope_inverse``; a model imported without a covariance matrix has ``slope_inverse`` None
    and scores with leverage 0 (its intervals are then slightly too narrow near the edges).
    """

    terms: tuple[str, ...]
    coef: FloatArray
    s: float
    dof: int
    n: int | None
    xmean: FloatArray | None
    slope_inverse: FloatArray | None
    x_min: FloatArray
    x_max: FloatArray

    @property
    def k(self) -> int:
        return len(self.coef) - 1

    @property
    def has_leverage(self) -> bool:
        return self.slope_inverse is not None

    @classmethod
    def from_fit(cls, fit: OLSFit) -> PredictionModel:
        return cls(fit.terms, np.array(fit.coef), fit.s, fit.dof, fit.n, np.array(fit.xmean),
                   np.array(fit.slope_inverse), np.array(fit.x_min), np.array(fit.x_max))

    @classmethod
    def from_covariance(cls, terms: Sequence[str], coef: ArrayLike, s: float, dof: int,
                        cov: ArrayLike | None = None, x_min: ArrayLike | None = None,
                        x_max: ArrayLike | None = None) -> PredictionModel:
        """A model fitted elsewhere; ``cov`` is ``s² (XᵀX)⁻¹`` with the intercept first."""
        coef = np.asarray(coef, dtype=np.float64)
        k = len(coef) - 1
        if len(terms) != k + 1 or next(iter(terms)) != INTERCEPT:
            raise DegenerateDataError(
                f"terms must start with '{INTERCEPT}' and name each coefficient")
        if not (s > 0 and np.isfinite(s)):
            raise DegenerateDataError(f"the residual standard error s must be positive; got {s}")
        if dof < 1:
            raise DegenerateDataError(f"the residual degrees of freedom must be >= 1; got {dof}")
        lo = np.full(k, -np.inf) if x_min is None else np.asarray(x_min, dtype=np.float64)
        hi = np.full(k, np.inf) if x_max is None else np.asarray(x_max, dtype=np.float64)
        if cov is None:
            return cls(tuple(terms), coef, float(s), int(dof), None, None, None, lo, hi)
        u = np.asarray(cov, dtype=np.float64) / s**2
        if u.shape != (k + 1, k + 1) or not np.allclose(u, u.T, rtol=1e-8, atol=0):
            raise DegenerateDataError(f"the covariance must be a symmetric {k + 1}x{k + 1} matrix")
        slope_inverse = u[1:, 1:]
        try:
            xmean = -np.linalg.solve(slope_inverse, u[1:, 0]).astype(np.float64, copy=False)
        except np.linalg.LinAlgError as exc:
            raise DegenerateDataError("the slopes' covariance block is singular") from exc
        inv_n = u[0, 0] - xmean @ slope_inverse @ xmean
        if not inv_n > 0:
            raise DegenerateDataError(
                "the covariance matrix is not s²(XᵀX)⁻¹ of a design with an intercept")
        return cls(tuple(terms), coef, float(s), int(dof), round(1.0 / inv_n), xmean,
                   slope_inverse, lo, hi)

    # scoring --------------------------------------------------------------------------
    def predict(self, x: ArrayLike) -> FloatArray:
        xs = self._rows(x)
        return self.coef[0] + xs @ self.coef[1:]

    def leverage(self, x: ArrayLike) -> FloatArray:
        xs = self._rows(x)
        if self.slope_inverse is None or self.xmean is None or self.n is None:
            return np.zeros(len(xs))
        return centred_leverage(xs, self.n, self.xmean, self.slope_inverse)

    def prediction_se(self, x: ArrayLike) -> FloatArray:
        """``s · sqrt(1 + x0ᵀ(XᵀX)⁻¹x0)``, the standard error of a single new observation."""
        return self.s * np.sqrt(1.0 + self.leverage(x))

    def critical_value(self, level: float) -> float:
        if not 0.0 < level < 1.0:
            raise ValueError(f"an interval level must lie strictly between 0 and 1; got {level}")
        return float(tails.t_ppf(0.5 + level / 2.0, self.dof))

    def interval(self, x: ArrayLike, level: float = 0.95) -> tuple[FloatArray, FloatArray]:
        """Prediction interval bounds ``(lower, upper)`` for each row."""
        mean = self.predict(x)
        half = self.critical_value(level) * self.prediction_se(x)
        return mean - half, mean + half

    def score(self, x: ArrayLike, y: ArrayLike, level: float = 0.95) -> Scores:
        """Predictions, intervals and standardized residuals for new rows ``(x, y)``."""
        xs = self._rows(x)
        ys = np.asarray(y, dtype=np.float64)
        if ys.shape != (len(xs),):
            raise ValueError("x and y need the same number of rows")
        mean = self.predict(xs)
        se = self.prediction_se(xs)
        half = self.critical_value(level) * se
        lower, upper = mean - half, mean + half
        extrapolated = np.any((xs < self.x_min) | (xs > self.x_max), axis=1)
        return Scores(mean, lower, upper, (ys - mean) / se, (ys >= lower) & (ys <= upper),
                      extrapolated)

    def _rows(self, x: ArrayLike) -> FloatArray:
        xs = np.asarray(x, dtype=np.float64)
        if xs.ndim == 1:
            xs = xs[:, None] if self.k == 1 else xs.reshape(-1, self.k)
        if xs.ndim != 2 or xs.shape[1] != self.k:
            raise ValueError(f"expected rows of {self.k} predictor values")
        return xs

