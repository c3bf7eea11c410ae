"""Ordinary least squares with an intercept: from raw rows (QR) or from merged day statistics.

Both paths reduce the problem to the same centred quantities (predictor means, the inverse of
the centred predictor cross-product matrix, slopes, residual sum of squares) and share one copy of
everything that follows (standard errors, tests, intervals, R², condition number).

Centring the predictors before factorizing is the classical remedy for the ill-conditioning that
an intercept column next to large-valued predictors causes (Longley 1967; Golub & Van Loan,
*Matrix Computations*, §5.3): on the NIST StRD Longley data it takes the QR solution from about
1e-11 to about 1e-14 relative error.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy
from numpy.typing import ArrayLike, NDArray

from monitor.errors import DegenerateDataError
from monitor.stats import tails
from monitor.stats.moments import Moments

FloatArray = NDArray[np.float64]
INTERCEPT = "intercept"

# Relative size under which a singular value counts as zero (the numpy.linalg.matrix_rank
# convention: largest singular value * max(rows, columns) * machine epsilon).
_EPS = np.finfo(np.float64).eps


@dataclass(frozen=True, eq=False)
class OLSFit:
    """A least-squares fit of ``y = b0 + b1 x1 + ... + bk xk + e``.

    ``coef[0]`` is the intercept. ``xmean`` and ``slope_inverse`` (the inverse of the centred
    predictor cross-product matrix) let every quadratic form be computed in centred form, which
    keeps leverages accurate when predictors are far from zero.
    """

    terms: tuple[str, ...]
    coef: FloatArray
    n: int
    rss: float
    tss: float
    xmean: FloatArray
    slope_inverse: FloatArray
    condition_number: float
    x_min: FloatArray
    x_max: FloatArray
    warnings: tuple[str, ...] = field(default=())

    def __post_init__(self) -> None:
        for name in ("coef", "xmean", "slope_inverse", "x_min", "x_max"):
            arr = np.array(getattr(self, name), dtype=np.float64)
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)

    # sizes ------------------------------------------------------------------------------
    @property
    def p(self) -> int:
        return len(self.coef)

    @property
    def k(self) -> int:
        return self.p - 1

    @property
    def dof(self) -> int:
        return self.n - self.p

    @property
    def predictors(self) -> tuple[str, ...]:
        return self.terms[1:]

    # scale ------------------------------------------------------------------------------
    @property
    def sigma2(self) -> float:
        return self.rss / self.dof

    @property
    def s(self) -> float:
        """Residual standard error ``sqrt(RSS / (n - p))``."""
        return float(np.sqrt(self.sigma2))

    @property
    def r_squared(self) -> float:
        return 1.0 - self.rss / self.tss if self.tss > 0 else float("nan")

    @property
    def adj_r_squared(self) -> float:
        return 1.0 - (1.0 - self.r_squared) * (self.n - 1) / self.dof

    # inference --------------------------------------------------------------------------
    @property
    def cov_unscaled(self) -> FloatArray:
        """``(X^T X)^{-1}`` for the design with the intercept column first."""
        return _full_inverse(self.n, self.xmean, self.slope_inverse)

    @property
    def cov(self) -> FloatArray:
        """Estimated covariance matrix of the coefficients, ``s^2 (X^T X)^{-1}``."""
        return self.sigma2 * self.cov_unscaled

    @property
    def std_errors(self) -> FloatArray:
        return np.sqrt(np.diag(self.cov))

    @property
    def tvalues(self) -> FloatArray:
        return self.coef / self.std_errors

    @property
    def pvalues(self) -> FloatArray:
        return 2.0 * tails.t_sf(np.abs(self.tvalues), self.dof)

    def confidence_interval(self, level: float = 0.95) -> FloatArray:
        """Two-sided confidence intervals of the coefficients, shape ``(p, 2)``."""
        _check_level(level)
        half = tails.t_ppf(0.5 + level / 2.0, self.dof) * self.std_errors
        return np.column_stack([self.coef - half, self.coef + half])

    # prediction -------------------------------------------------------------------------
    def predict(self, x: ArrayLike) -> FloatArray:
        """Mean predictions for rows of predictors (without the intercept column)."""
        xs = _as_rows(x, self.k)
        return self.coef[0] + xs @ self.coef[1:]

    def leverage(self, x: ArrayLike) -> FloatArray:
        """``x0^T (X^T X)^{-1} x0`` for each row, computed in centred form."""
        return centred_leverage(_as_rows(x, self.k), self.n, self.xmean, self.slope_inverse)


def centred_leverage(x: FloatArray, n: int, xmean: FloatArray,
                     slope_inverse: FloatArray) -> FloatArray:
    """``1/n + (x - xbar)^T S^{-1} (x - xbar)``, which equals ``x0^T (X^T X)^{-1} x0``."""
    d = x - xmean
    return 1.0 / n + np.einsum("ij,jk,ik->i", d, slope_inverse, d)


def fit_ols(x: ArrayLike, y: ArrayLike, names: Sequence[str] | None = None) -> OLSFit:
    """Least squares with an intercept by Householder QR of the centred, scaled predictors."""
    xs = np.asarray(x, dtype=np.float64)
    if xs.ndim == 1:
        xs = xs[:, None]
    ys = np.asarray(y, dtype=np.float64)
    n, k = xs.shape
    names = _names(names, k)
    if ys.shape != (n,):
        raise ValueError(f"y has shape {ys.shape}; expected ({n},)")
    if not (np.all(np.isfinite(xs)) and np.all(np.isfinite(ys))):
        raise DegenerateDataError(
            "the data hold missing or infinite values; a fit needs finite numbers")
    _check_size(n, k)
    lo, hi = xs.min(axis=0), xs.max(axis=0)
    _check_constant(names, lo, hi)
    xmean, ymean = xs.mean(axis=0), float(ys.mean())
    xc, yc = xs - xmean, ys - ymean
    scale = np.sqrt(np.einsum("ij,ij->j", xc, xc))
    q, r = np.linalg.qr(xc / scale)
    _check_rank(names, np.abs(np.diag(r)), scipy.linalg.svdvals(r), n)
    slopes = scipy.linalg.solve_triangular(r, q.T @ yc) / scale
    resid = yc - xc @ slopes
    r_inv = scipy.linalg.solve_triangular(r, np.eye(k))
    slope_inverse = (r_inv @ r_inv.T) / np.outer(scale, scale)
    root = r * scale  # upper-triangular square root of the centred cross-products
    return OLSFit(
        terms=(INTERCEPT, *names),
        coef=np.concatenate([[ymean - xmean @ slopes], slopes]),
        n=n, rss=float(resid @ resid), tss=float(yc @ yc), xmean=xmean,
        slope_inverse=slope_inverse, condition_number=_condition_number(n, xmean, root),
        x_min=lo, x_max=hi,
    )


def fit_moments(moments: Moments, names: Sequence[str] | None = None) -> OLSFit:
    """The same fit from merged statistics of ``[x..., y]`` (Cholesky of the scaled co-moments).

    Agrees with :func:`fit_ols` on the raw rows to about ``cond(corr(X)) * 1e-16`` relative.
    """
    k = moments.dim - 1
    names = _names(names, k)
    n = moments.n
    _check_size(n, k)
    mxx = moments.comoment[:k, :k]
    mxy = moments.comoment[:k, k]
    xmean = moments.mean[:k]
    variances = np.diag(mxx)
    tiny = n * (64 * _EPS * np.maximum(np.abs(xmean), 1.0)) ** 2
    constant = variances <= tiny
    _check_constant(names, np.where(constant, xmean, 0.0), np.where(constant, xmean, 1.0))
    scale = np.sqrt(variances)
    try:
        upper = scipy.linalg.cholesky(mxx / np.outer(scale, scale), lower=False)
    except np.linalg.LinAlgError:
        upper = np.zeros((k, k))
    # The co-moments square the condition number, so the usable relative size is its root.
    _check_rank(names, np.abs(np.diag(upper)), scipy.linalg.svdvals(upper), n,
                floor=16 * np.sqrt(_EPS))
    slopes = scipy.linalg.cho_solve((upper, False), mxy / scale) / scale
    rss = float(moments.comoment[k, k] - mxy @ slopes)
    u_inv = scipy.linalg.solve_triangular(upper, np.eye(k))
    slope_inverse = (u_inv @ u_inv.T) / np.outer(scale, scale)
    return OLSFit(
        terms=(INTERCEPT, *names),
        coef=np.concatenate([[moments.mean[k] - xmean @ slopes], slopes]),
        n=n, rss=max(rss, 0.0), tss=float(moments.comoment[k, k]), xmean=xmean,
        slope_inverse=slope_inverse,
        condition_number=_condition_number(n, xmean, upper * scale),
        x_min=moments.minimum[:k], x_max=moments.maximum[:k],
    )


# shared helpers -------------------------------------------------------------------------------
def _full_inverse(n: int, xmean: FloatArray, slope_inverse: FloatArray) -> FloatArray:
    """``(X^T X)^{-1}`` with the intercept first, from its centred blocks (partitioned inverse)."""
    k = len(xmean)
    out = np.empty((k + 1, k + 1))
    sx = slope_inverse @ xmean
    out[0, 0] = 1.0 / n + xmean @ sx
    out[0, 1:] = out[1:, 0] = -sx
    out[1:, 1:] = slope_inverse
    return out


def _condition_number(n: int, xmean: FloatArray, root: FloatArray) -> float:
    """2-norm condition number of the design ``[1, X]``.

    ``X^T X = A^T A`` with ``A = [[sqrt(n), sqrt(n) xbar^T], [0, R]]`` where ``R^T R`` is the
    centred cross-product matrix, so the singular values of the small matrix ``A`` are those of
    the design (this is the figure statsmodels reports as ``condition_number``).
    """
    k = len(xmean)
    a = np.zeros((k + 1, k + 1))
    a[0, 0] = np.sqrt(n)
    a[0, 1:] = np.sqrt(n) * xmean
    a[1:, 1:] = root
    sv = scipy.linalg.svdvals(a)
    return float(sv[0] / sv[-1]) if sv[-1] > 0 else float("inf")


def _names(names: Sequence[str] | None, k: int) -> tuple[str, ...]:
    if names is None:
        return tuple(f"x{i + 1}" for i in range(k))
    names = tuple(names)
    if len(names) != k:
        raise ValueError(f"{len(names)} names given for {k} predictors")
    if INTERCEPT in names:
        raise ValueError(f"'{INTERCEPT}' is reserved for the constant term")
    return names


def _check_size(n: int, k: int) -> None:
    if k < 1:
        raise DegenerateDataError("a fit needs at least one predictor column")
    p = k + 1
    if n <= p:
        raise DegenerateDataError(
            f"a fit with {p} coefficients needs more than {p} rows to estimate its error; "
            f"got {n}"
        )


def _check_constant(names: Sequence[str], lo: FloatArray, hi: FloatArray) -> None:
    for name, a, b in zip(names, lo, hi, strict=True):
        if a == b:
            raise DegenerateDataError(
                f"predictor '{name}' is constant (every row is {a:g}), so its slope cannot be "
                "estimated; fit on data where it varies, or drop it"
            )


def _check_rank(names: Sequence[str], diag: FloatArray, singular: FloatArray, n: int,
                floor: float | None = None) -> None:
    k = len(names)
    tol = floor if floor is not None else max(n, k) * _EPS
    if singular.size and singular[-1] > tol * singular[0]:
        return
    rank = int(np.sum(singular > tol * (singular[0] if singular.size else 1.0)))
    worst = int(np.argmin(diag)) if diag.size else 0
    others = ", ".join(f"'{m}'" for i, m in enumerate(names) if i != worst) or "the intercept"
    raise DegenerateDataError(
        f"predictor '{names[worst]}' is (almost) a linear combination of the intercept and "
        f"{others} (rank {rank + 1} of {k + 1}); drop one of them or fit on data where they vary "
        "independently"
    )


def _check_level(level: float) -> None:
    if not 0.0 < level < 1.0:
        raise ValueError(f"an interval level must lie strictly between 0 and 1; got {level}")


def _as_rows(x: ArrayLike, k: int) -> FloatArray:
    xs = np.asarray(x, dtype=np.float64)
    if xs.ndim == 1:
        xs = xs.reshape(-1, k) if k > 1 else xs[:, None]
    if xs.ndim != 2 or xs.shape[1] != k:
        raise ValueError(f"expected rows of {k} predictor values")
    return xs
