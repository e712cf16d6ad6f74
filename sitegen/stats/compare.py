"""Do several independent datasets estimate the same value?

Cochran's Q test of homogeneity (common practice in meta-analysis):
Q = Σ wᵢ (bᵢ − b̄)² with wᵢ = 1/SEᵢ² and b̄ the weighted mean, referred to χ² on
k − 1 degrees of freedom. It treats each dataset's standard error as known,
so it is approximate for small datasets.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sitegen.stats.distributions import chi2_sf


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
