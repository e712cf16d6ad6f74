"""The figures acceptance criteria need beyond the fit itself: standards read back, bias at chosen levels.

Pure functions on numpy arrays. The bias at a level is the fitted value there minus the level (for a
method comparison y is the method under test and x the reference), with the confidence interval of the
mean response (:func:`sitegen.stats.ols.bands`), shifted by the same level.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sitegen.stats.ols import OlsFit, bands

FloatArray = NDArray[np.float64]


@dataclass(frozen=True, slots=True)
class ReadBack:
    """One standard's response read back through the line as x."""

    row: int  # CSV row
    nominal: float
    found: float
    percent: float  # 100 (found − nominal) / nominal; NaN for a nominal of 0 (a blank)


@dataclass(frozen=True, slots=True)
class BiasAt:
    """The fitted bias (fitted y − x) at one level, with its confidence interval."""

    at: float
    estimate: float
    ci_low: float
    ci_high: float


def read_back(
    intercept: float, slope: float, x: FloatArray, y: FloatArray, rows: NDArray[np.integer]
) -> tuple[ReadBack, ...]:
    """Each standard's x found from its response, ``(y − intercept) / slope``, against its nominal x."""
    found = np.full(x.shape, np.nan) if slope == 0 or not np.isfinite(slope) else (y - intercept) / slope
    with np.errstate(divide="ignore", invalid="ignore"):
        percent = np.where(x != 0, 100.0 * (found - x) / np.abs(x), np.nan)
    return tuple(
        ReadBack(int(r), float(n), float(f), float(p)) for r, n, f, p in zip(rows, x, found, percent, strict=True)
    )


def bias_at(fit: OlsFit, X_at: FloatArray, at: FloatArray) -> tuple[BiasAt, ...]:
    """Fitted y − x at each level; ``X_at`` is the model's design at those levels."""
    b = bands(fit, X_at)
    return tuple(
        BiasAt(float(a), float(f - a), float(lo - a), float(hi - a))
        for a, f, lo, hi in zip(at, b.fit, b.mean_low, b.mean_high, strict=True)
    )
