"""Tail probabilities and quantiles of the normal, t, chi-square, F and binomial laws.

These are the functions ``scipy.stats``' distributions call underneath (normal: ``ndtr`` and
``ndtri``; t: ``stdtr`` and ``stdtrit``; chi-square: ``chdtrc`` and ``gammaincinv``; F: ``fdtr``
and ``fdtrc``; binomial: ``bdtrc``), called directly from ``scipy.special``. Importing
``scipy.stats`` costs about a second of every process start (it loads ``scipy.optimize`` and
``scipy.spatial`` and builds the distributions' docstrings); the nightly check, the daemon and
each worker process paid it for a handful of scalars. ``tests/stats/test_tails.py`` checks
every function against ``scipy.stats`` itself.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import scipy  # its submodules load on first use (scipy.special: on the first call here)
from numpy.typing import ArrayLike


def norm_cdf(x: ArrayLike) -> Any:
    return scipy.special.ndtr(x)


def norm_sf(x: ArrayLike) -> Any:
    return scipy.special.ndtr(-np.asarray(x, dtype=np.float64))


def norm_ppf(q: ArrayLike) -> Any:
    return scipy.special.ndtri(q)


def norm_isf(q: ArrayLike) -> Any:
    return -scipy.special.ndtri(q)


def t_cdf(x: ArrayLike, df: ArrayLike) -> Any:
    return scipy.special.stdtr(df, x)


def t_sf(x: ArrayLike, df: ArrayLike) -> Any:
    return scipy.special.stdtr(df, -np.asarray(x, dtype=np.float64))


def t_ppf(q: ArrayLike, df: ArrayLike) -> Any:
    return scipy.special.stdtrit(df, q)


def chi2_sf(x: ArrayLike, df: ArrayLike) -> Any:
    return scipy.special.chdtrc(df, x)


def chi2_ppf(q: ArrayLike, df: ArrayLike) -> Any:
    return 2.0 * scipy.special.gammaincinv(np.asarray(df, dtype=np.float64) / 2.0, q)


def f_cdf(x: ArrayLike, dfn: ArrayLike, dfd: ArrayLike) -> Any:
    return scipy.special.fdtr(dfn, dfd, x)


def f_sf(x: ArrayLike, dfn: ArrayLike, dfd: ArrayLike) -> Any:
    return scipy.special.fdtrc(dfn, dfd, x)


def binom_sf(k: int, n: int, p: float) -> float:
    """``P(X > k)`` for ``X ~ Bin(n, p)``, 1 below the support and 0 at or past its top."""
    if k < 0:
        return 1.0
    if k >= n:
        return 0.0
    return float(scipy.special.bdtrc(k, n, p))
