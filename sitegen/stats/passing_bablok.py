"""Passing–Bablok regression: a line for method comparison that outliers do not pull.

The definition followed is Passing & Bablok, *A new biometrical procedure for
testing the equality of measurements from two different analytical methods*,
J. Clin. Chem. Clin. Biochem. 1983 (21:709–720):

- every pair of points i < j gives a slope S_ij = (y_j − y_i)/(x_j − x_i);
  pairs with x_i = x_j and y_i = y_j (0/0) give none, and slopes of exactly −1
  are left out; x_i = x_j with y_i ≠ y_j gives an infinite slope (points are
  taken in order of x, then y, so it is +∞; the shift below makes the sign
  immaterial);
- N slopes remain; K of them are below −1. The slope b is the median of the
  sorted slopes shifted by K: S_((N+1)/2+K) for odd N, the mean of S_(N/2+K)
  and S_(N/2+1+K) for even N. The intercept is a = median(y_i − b·x_i);
- the slope's interval is rank based: C = z·√(n(n−1)(2n+5)/18) with z the normal
  quantile of the level, M1 = round((N − C)/2), M2 = N − M1 + 1, limits S_(M1+K)
  and S_(M2+K); the intercept's limits are median(y − b_high·x) and
  median(y − b_low·x). When those ranks fall outside 1..N the sample is too
  small for the interval, which is then NaN and said so;
- linearity: the cusum test of the same paper. Points above the line score
  √(L/l), points below −√(l/L) (l above, L below, points on the line 0); ordered
  by their projection D_i = (y_i + x_i/b − a)/√(1 + 1/b²) on the line, the
  largest absolute cumulative sum is compared with h·√(L + 1), with
  h = √(−ln(α/2)/2) the Kolmogorov–Smirnov constant (1.36 at α = 0.05, 1.63 at
  0.01 as tabulated in the paper; from memory).

All pairwise slopes are formed, O(n²) in time and memory, so the number of
points is bounded (:data:`MAX_POINTS`); above it :class:`FitError` says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.stats.distributions import norm_ppf

__all__ = [
    "BOOTSTRAP_MAX_POINTS",
    "MAX_POINTS",
    "PassingBablok",
    "bootstrap_values",
    "pairwise_slopes",
    "passing_bablok",
    "shifted_value_interval",
]

MAX_POINTS = 3000  # 4.5 million pairwise slopes, about 36 MB per array
BOOTSTRAP_MAX_POINTS = 250  # 1,000 resamples of 31,000 slopes each: about 2 s
BOOTSTRAP_RESAMPLES = 1000
BOOTSTRAP_SEED = 19830901  # fixed, so that a page's intervals repeat exactly
FloatArray = NDArray[np.float64]
INTERVAL_TEXT = "rank-based interval of Passing & Bablok (1983), normal quantile"


@dataclass(frozen=True, slots=True)
class PassingBablok:
    """The Passing–Bablok line, its rank-based intervals and the cusum linearity check."""

    n: int
    slopes_used: int  # N
    slopes_below_minus_one: int  # K
    slope: float
    intercept: float
    slope_ci_low: float
    slope_ci_high: float
    intercept_ci_low: float
    intercept_ci_high: float
    interval_available: bool
    cusum_max: float
    cusum_critical: float
    linear: bool  # the cusum test finds no departure from linearity
    interval_method: str = INTERVAL_TEXT


def pairwise_slopes(x: FloatArray, y: FloatArray) -> tuple[FloatArray, int]:
    """The sorted slopes the method uses and K, the count below −1."""
    order = np.lexsort((y, x))
    xs = x[order]
    ys = y[order]
    i, j = np.triu_indices(xs.size, k=1)
    dx = xs[j] - xs[i]
    dy = ys[j] - ys[i]
    keep = ~((dx == 0.0) & (dy == 0.0))
    dx = dx[keep]
    dy = dy[keep]
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.where(dx == 0.0, np.inf, dy / np.where(dx == 0.0, 1.0, dx))
    s = s[s != -1.0]
    s.sort(kind="stable")
    k = int(np.searchsorted(s, -1.0, side="left"))
    return s, k


def _at(s: FloatArray, rank: int) -> float:
    """The slope of 1-based rank ``rank``."""
    return float(s[rank - 1])


def _median_shifted(s: FloatArray, k: int) -> float:
    n_s = s.size
    if n_s % 2 == 1:
        return _at(s, (n_s + 1) // 2 + k)
    return 0.5 * (_at(s, n_s // 2 + k) + _at(s, n_s // 2 + 1 + k))


def slope_ranks(n: int, n_slopes: int, level: float) -> tuple[int, int]:
    """M1 and M2 of the rank-based slope interval (before the shift by K)."""
    z = float(norm_ppf(0.5 + level / 2.0))
    c = z * math.sqrt(n * (n - 1) * (2 * n + 5) / 18.0)
    m1 = math.floor((n_slopes - c) / 2.0 + 0.5)
    return m1, n_slopes - m1 + 1


def passing_bablok(x: FloatArray, y: FloatArray, *, level: float) -> PassingBablok:
    """Fit the Passing–Bablok line of y (method under test) on x (reference)."""
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level!r}")
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.shape != y.shape or x.ndim != 1:
        raise ValueError(f"x and y must be 1-D arrays of equal length, got {x.shape} and {y.shape}")
    n = int(x.size)
    if n < 3:
        raise FitError(f"Passing–Bablok regression needs at least 3 pairs, got {n}")
    if n > MAX_POINTS:
        raise FitError(
            f"Passing–Bablok regression compares every pair of points; {n} points are more than the "
            f"{MAX_POINTS} it is limited to here"
        )
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise FitError("Passing–Bablok regression needs finite results in both columns")
    s, k = pairwise_slopes(x, y)
    n_s = int(s.size)
    if n_s == 0 or not (1 <= (n_s + 1) // 2 + k <= n_s) or (n_s % 2 == 0 and n_s // 2 + 1 + k > n_s):
        raise FitError("Passing–Bablok regression finds no usable pairs of points (all points coincide)")
    b = _median_shifted(s, k)
    if not math.isfinite(b):
        raise FitError("Passing–Bablok slope is infinite: the reference values do not vary enough")
    a = float(np.median(y - b * x))
    m1, m2 = slope_ranks(n, n_s, level)
    b_low = b_high = a_low = a_high = math.nan
    if m1 >= 1 and m1 <= m2 and m2 + k <= n_s:
        b_low, b_high = _at(s, m1 + k), _at(s, m2 + k)
    available = math.isfinite(b_low) and math.isfinite(b_high)
    if available:
        a_low, a_high = shifted_value_interval(x, y, 0.0, b_low, b_high)
    else:
        b_low = b_high = math.nan
    cusum_max, critical = cusum_linearity(x, y, a, b, level)
    return PassingBablok(
        n=n,
        slopes_used=n_s,
        slopes_below_minus_one=k,
        slope=b,
        intercept=a,
        slope_ci_low=b_low,
        slope_ci_high=b_high,
        intercept_ci_low=a_low,
        intercept_ci_high=a_high,
        interval_available=available,
        cusum_max=cusum_max,
        cusum_critical=critical,
        linear=not (cusum_max > critical),
    )


def line_of(x: FloatArray, y: FloatArray) -> tuple[float, float] | None:
    """Intercept and slope by the published definition, or None when no line exists (no interval)."""
    s, k = pairwise_slopes(x, y)
    n_s = int(s.size)
    if n_s == 0 or (n_s + 1) // 2 + k > n_s or (n_s % 2 == 0 and n_s // 2 + 1 + k > n_s):
        return None
    b = _median_shifted(s, k)
    if not math.isfinite(b):
        return None
    return float(np.median(y - b * x)), b


def bootstrap_values(
    x: FloatArray,
    y: FloatArray,
    at: FloatArray,
    *,
    level: float,
    resamples: int = BOOTSTRAP_RESAMPLES,
    seed: int = BOOTSTRAP_SEED,
) -> tuple[FloatArray, FloatArray]:
    """Percentile bootstrap interval of the line's value a + b·X at each X of ``at``.

    Pairs are resampled with replacement (``resamples`` times, from a fixed seed, so the result
    repeats exactly); each resample gets its Passing–Bablok line. Resamples without a line are
    skipped. The method has no closed-form interval for its value at a level; the bootstrap is what
    method-comparison practice uses there (CLSI EP09; from memory).
    """
    n = int(x.size)
    if n > BOOTSTRAP_MAX_POINTS:
        raise FitError(
            f"the bootstrap interval of the Passing–Bablok line is limited to {BOOTSTRAP_MAX_POINTS} pairs; "
            f"this comparison has {n}"
        )
    rng = np.random.default_rng(seed)
    at = np.asarray(at, dtype=np.float64)
    values = []
    for _ in range(resamples):
        idx = rng.integers(0, n, n)
        found = line_of(x[idx], y[idx])
        if found is not None:
            values.append(found[0] + found[1] * at)
    if len(values) < resamples // 2:
        raise FitError("too few bootstrap resamples give a Passing–Bablok line for an interval")
    table = np.array(values)
    alpha = 1.0 - level
    low = np.quantile(table, alpha / 2.0, axis=0)
    high = np.quantile(table, 1.0 - alpha / 2.0, axis=0)
    return np.asarray(low, dtype=np.float64), np.asarray(high, dtype=np.float64)


def shifted_value_interval(x: FloatArray, y: FloatArray, at: float, b_low: float, b_high: float) -> tuple[float, float]:
    """The method's intercept interval with x measured from ``at``: the line's value at x = at.

    At ``at`` = 0 this is the paper's intercept interval. Shifting x leaves every pairwise slope
    (and so the slope interval) unchanged, so the value at ``at`` is the intercept of the shifted
    data and gets the same construction.
    """
    u = x - at
    first = float(np.median(y - b_high * u))
    second = float(np.median(y - b_low * u))
    return min(first, second), max(first, second)


def cusum_linearity(x: FloatArray, y: FloatArray, a: float, b: float, level: float) -> tuple[float, float]:
    """Largest absolute cusum of the residual signs and its critical value h·√(L + 1)."""
    resid = y - (a + b * x)
    above = int(np.sum(resid > 0.0))
    below = int(np.sum(resid < 0.0))
    alpha = 1.0 - level
    h = math.sqrt(-math.log(alpha / 2.0) / 2.0)
    critical = h * math.sqrt(below + 1)
    if above == 0 or below == 0 or b == 0.0:  # every score is 0 (or the projection is undefined)
        return 0.0, critical
    score = np.where(resid > 0.0, math.sqrt(below / above), np.where(resid < 0.0, -math.sqrt(above / below), 0.0))
    d = (y + x / b - a) / math.sqrt(1.0 + 1.0 / (b * b))
    cusum = np.cumsum(score[np.argsort(d, kind="stable")])
    return float(np.max(np.abs(cusum))), critical
