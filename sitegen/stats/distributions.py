"""Tail probabilities and quantiles of the t, F, χ², beta and normal distributions.

Thin wrappers over ``scipy.special`` (imported in a quarter of the time of
``scipy.stats``, which each worker process would otherwise pay for). The tests
compare every function with its ``scipy.stats`` counterpart.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special


def t_sf(x: ArrayLike, df: float) -> Any:
    """P(T > x) for Student's t with ``df`` degrees of freedom."""
    return special.stdtr(df, -np.asarray(x, dtype=float))


def t_ppf(q: float, df: float) -> float:
    """The ``q`` quantile of Student's t."""
    return float(special.stdtrit(df, q))


def t_isf(a: float, df: float) -> float:
    """The upper ``a`` quantile of Student's t (accurate for tiny ``a``)."""
    return float(-special.stdtrit(df, a))


def f_sf(x: float, d1: float, d2: float) -> float:
    """P(F > x) for the F distribution."""
    return float(special.fdtrc(d1, d2, x))


def f_ppf(q: float, d1: float, d2: float) -> float:
    """The ``q`` quantile of the F distribution."""
    return float(special.fdtri(d1, d2, q))


def chi2_sf(x: float, df: float) -> float:
    """P(χ² > x)."""
    return float(special.chdtrc(df, x))


def beta_cdf(x: float, a: float, b: float) -> float:
    """P(B ≤ x) for the beta distribution."""
    return float(special.betainc(a, b, x))


def beta_sf(x: float, a: float, b: float) -> float:
    """P(B > x) for the beta distribution."""
    return float(special.betaincc(a, b, x))


def norm_ppf(q: ArrayLike) -> NDArray[np.float64]:
    """Standard normal quantiles."""
    return np.asarray(special.ndtri(np.asarray(q, dtype=float)), dtype=np.float64)


def norm_sf(z: float) -> float:
    """P(Z > z) for the standard normal."""
    return float(special.ndtr(-z))
