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
  largest absolute cumulative sum is compared with h_γ·√(L + 1). The paper takes
  h_γ from the limiting Kolmogorov–Smirnov distribution, P(K ≤ h) = 1 − 2Σ(−1)^(k−1)
  e^(−2k²h²), tabulating 1.36 at γ = 5 % and 1.63 at 1 % (the values as printed,
  from memory). :func:`kolmogorov_quantile` computes h_γ for any level from that
  distribution (tested against ``scipy.stats.kstwobign.ppf``: 1.3581 at 95 %,
  1.6276 at 99 %, which round to the paper's figures). The first term alone,
  √(−ln(γ/2)/2), used before, is within 2·10⁻⁵ of it at 95 % but 0.005 off at 50 %.

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
    "kolmogorov_cdf",
    "kolmogorov_quantile",
    "pairwise_slopes",
    "passing_bablok",
    "rank_value_interval",
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
    critical = kolmogorov_quantile(level) * math.sqrt(below + 1)
    if above == 0 or below == 0 or b == 0.0:  # every score is 0 (or the projection is undefined)
        return 0.0, critical
    score = np.where(resid > 0.0, math.sqrt(below / above), np.where(resid < 0.0, -math.sqrt(above / below), 0.0))
    d = (y + x / b - a) / math.sqrt(1.0 + 1.0 / (b * b))
    cusum = np.cumsum(score[np.argsort(d, kind="stable")])
    return float(np.max(np.abs(cusum))), critical


def kolmogorov_cdf(h: float) -> float:
    """P(K ≤ h) of the limiting Kolmogorov–Smirnov distribution (Kolmogorov 1933).

    Two forms of the same function, each used where its series converges in a few terms:
    1 − 2Σ(−1)^(k−1)·e^(−2k²h²) above h = 1, and (√(2π)/h)·Σe^(−(2k−1)²π²/(8h²)) below.
    """
    if h <= 0.0:
        return 0.0
    if h < 1.0:
        c = math.pi * math.pi / (8.0 * h * h)
        return math.sqrt(2.0 * math.pi) / h * sum(math.exp(-((2 * k - 1) ** 2) * c) for k in range(1, 12))
    terms = (math.exp(-2.0 * k * k * h * h) for k in range(1, 40))
    return 1.0 - 2.0 * math.fsum(t if k % 2 == 0 else -t for k, t in enumerate(terms))


def kolmogorov_quantile(p: float) -> float:
    """The h with P(K ≤ h) = p (bisection to double precision on :func:`kolmogorov_cdf`)."""
    if not 0.0 < p < 1.0:
        raise ValueError(f"p must lie strictly between 0 and 1, got {p!r}")
    low, high = 0.05, 10.0
    for _ in range(200):
        mid = 0.5 * (low + high)
        if kolmogorov_cdf(mid) < p:
            low = mid
        else:
            high = mid
        if high - low <= 4e-16 * high:
            break
    return 0.5 * (low + high)


#: How finely the slope interval is searched for the extreme values of the line at a level.
_SLOPE_GRID = 41


def rank_value_interval(x: FloatArray, y: FloatArray, at: FloatArray, *, level: float) -> tuple[FloatArray, FloatArray]:
    """An interval for the line's value a + b·X at each X of ``at``, without resampling (any n).

    Used above :data:`BOOTSTRAP_MAX_POINTS` pairs, where the bootstrap's 1,000 refits of n²/2 slopes cost too
    much. A Bonferroni combination of two distribution-free intervals, each at level 1 − α/2:

    - the slope's rank-based interval of Passing & Bablok (1983) at that level, [b_L, b_H];
    - for a slope b, the value at X is the median of u_i = y_i − b·(x_i − X); the order-statistic (sign-test)
      interval of a median (common practice; e.g. Conover, *Practical Nonparametric Statistics*, from memory)
      is [u_(r), u_(n−r+1)] with r = ⌊(n − z·√n)/2⌋, z the normal quantile of 1 − α/4 (the binomial ranks'
      normal approximation, fine at the n this is used for).

    The interval is the union of the second over the slopes of the first (b on a grid of
    :data:`_SLOPE_GRID` points from b_L to b_H). Both parts hold with probability 1 − α/2 each, so the union
    covers with probability at least 1 − α (Bonferroni): it is conservative, and wider than the bootstrap's;
    a coverage simulation in the tests finds it at or above the nominal level.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    at = np.asarray(at, dtype=np.float64)
    n = int(x.size)
    alpha = 1.0 - level
    s, k = pairwise_slopes(x, y)
    m1, m2 = slope_ranks(n, int(s.size), 1.0 - alpha / 2.0)
    if m1 < 1 or m2 + k > s.size or m1 > m2:
        raise FitError(f"{n} pairs are too few for the rank-based interval of the line's value")
    b_low, b_high = _at(s, m1 + k), _at(s, m2 + k)
    if not (math.isfinite(b_low) and math.isfinite(b_high)):
        raise FitError("the slope's rank-based interval is not finite, so the line's value has no interval")
    z = float(norm_ppf(1.0 - alpha / 4.0))
    r = math.floor((n - z * math.sqrt(n)) / 2.0)
    if r < 1:
        raise FitError(f"{n} pairs are too few for the order-statistic interval of a median")
    lows = np.full(at.shape, np.inf)
    highs = np.full(at.shape, -np.inf)
    for b in np.linspace(b_low, b_high, _SLOPE_GRID):
        u = np.sort(y[None, :] - b * (x[None, :] - at[:, None]), axis=1)
        lows = np.minimum(lows, u[:, r - 1])
        highs = np.maximum(highs, u[:, n - r])
    return np.asarray(lows, dtype=np.float64), np.asarray(highs, dtype=np.float64)
