"""Do several independent datasets estimate the same value?

Cochran's Q test of homogeneity (common practice in meta-analysis):
Q = Σ wᵢ (bᵢ − b̄)² with wᵢ = 1/SEᵢ² and b̄ the weighted mean, referred to χ² on
k − 1 degrees of freedom. It treats each dataset's standard error as known,
so it is approximate for small datasets.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, slots=True)
class Homogeneity:
    """Cochran's Q for a set of estimates."""

    q: float
    df: int
    p_value: float
    pooled: float
    pooled_se: float


def homogeneity(estimates: Sequence[float], std_errors: Sequence[float]) -> Homogeneity | None:
    """Cochran's Q, or None when fewer than two usable estimates."""
    b = np.asarray(estimates, dtype=float)
    se = np.asarray(std_errors, dtype=float)
    ok = np.isfinite(b) & np.isfinite(se) & (se > 0)
    b, se = b[ok], se[ok]
    if b.size < 2:
        return None
    w = 1 / se**2
    pooled = float(np.sum(w * b) / np.sum(w))
    q = float(np.sum(w * (b - pooled) ** 2))
    df = int(b.size - 1)
    return Homogeneity(q, df, chi2_sf(q, df), pooled, float(np.sqrt(1 / np.sum(w))))


def chi2_sf(x: float, df: int) -> float:
    """Upper tail of the χ² distribution, Q(df/2, x/2), the regularized upper incomplete gamma.

    Series for x < a + 1, Lentz's continued fraction otherwise (the classic pairing, e.g.
    Numerical Recipes §6.2, from memory). Written out so that the index page does not
    import scipy.stats (half a second); the tests compare it with ``scipy.stats.chi2.sf``.
    """
    if not math.isfinite(x):
        return 0.0 if x > 0 else 1.0
    if x <= 0:
        return 1.0
    a, z = df / 2.0, x / 2.0
    log_front = a * math.log(z) - z - math.lgamma(a)
    if z < a + 1:  # lower series P(a, z), then Q = 1 − P
        term = total = 1.0 / a
        k = a
        for _ in range(10_000):
            k += 1
            term *= z / k
            total += term
            if abs(term) < abs(total) * 1e-16:
                break
        return max(0.0, 1.0 - total * math.exp(log_front))
    tiny = 1e-300
    b = z + 1 - a
    c = 1 / tiny
    d = 1 / b
    h = d
    for i in range(1, 10_000):
        an = -i * (i - a)
        b += 2
        d = an * d + b
        d = tiny if abs(d) < tiny else d
        c = b + an / c
        c = tiny if abs(c) < tiny else c
        d = 1 / d
        step = d * c
        h *= step
        if abs(step - 1) < 1e-16:
            break
    return min(1.0, math.exp(log_front) * h)
