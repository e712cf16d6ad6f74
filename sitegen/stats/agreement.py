"""How well two methods agree: the difference analysis of Bland and Altman.

For paired results of a method under test (y) and a reference (x), each pair's
difference d = y − x (or, on the percent scale, 100·(y − x)/((x + y)/2)) is
summarised as in Bland & Altman, *Statistical methods for assessing agreement
between two methods of clinical measurement*, Lancet 1986 (i:307–310):

- the mean difference d̄ (the average bias) with its interval d̄ ± t·s/√n,
  t on n − 1 degrees of freedom;
- the standard deviation s of the differences;
- the limits of agreement d̄ ± z·s, z the normal quantile of the confidence level
  (1.96 at 95 %; the 1986 paper rounds it to 2);
- each limit's interval: limit ± t·SE with the approximation SE ≈ √(3s²/n)
  published in that paper and repeated in Bland & Altman, *Measuring agreement in
  method comparison studies*, Statistical Methods in Medical Research 1999
  (8:135–160). We use this published approximation, not the exact-variance form
  s·√(1/n + z²/(2(n − 1))) it approximates (they differ by about 1.5 % at 95 %).

The check whether the differences grow with the level is the one both papers
suggest: the differences regressed on the pairs' means (least squares, t test of
the slope on n − 2 degrees of freedom).

Too few pairs (fewer than 3), non-finite values, and (on the percent scale) a
pair whose mean is zero raise :class:`FitError`; a bad level raises ``ValueError``.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.model import Agreement
from sitegen.stats.distributions import norm_ppf, t_ppf, t_sf

__all__ = ["Agreement", "difference_analysis"]

Scale = Literal["absolute", "percent"]
LIMIT_SE_TEXT = "limits' intervals use SE ≈ √(3s²/n) (Bland & Altman 1986, 1999), t on n−1 df"


def differences(test: NDArray[np.float64], reference: NDArray[np.float64], scale: Scale) -> NDArray[np.float64]:
    """Each pair's difference y − x, or its percent of the pair's mean."""
    d = test - reference
    if scale == "absolute":
        return d
    mean = (test + reference) / 2.0
    if bool(np.any(mean == 0.0)):
        raise FitError("a pair whose two results average zero has no percent difference; use the absolute scale")
    return 100.0 * d / mean


def difference_analysis(
    test: NDArray[np.float64],
    reference: NDArray[np.float64],
    *,
    level: float,
    scale: Scale = "absolute",
) -> Agreement:
    """Mean difference, limits of agreement and their intervals, and the trend check."""
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level!r}")
    if scale not in ("absolute", "percent"):
        raise ValueError(f"scale must be 'absolute' or 'percent', got {scale!r}")
    y = np.asarray(test, dtype=np.float64)
    x = np.asarray(reference, dtype=np.float64)
    if y.shape != x.shape or y.ndim != 1:
        raise ValueError(f"test and reference must be 1-D arrays of equal length, got {y.shape} and {x.shape}")
    n = int(y.size)
    if n < 3:
        raise FitError(f"the difference analysis needs at least 3 pairs, got {n}")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise FitError("the difference analysis needs finite results in both columns")
    d = differences(y, x, scale)
    mean_d = float(np.mean(d))
    sd = float(np.std(d, ddof=1))
    t = t_ppf(0.5 + level / 2.0, n - 1)
    z = float(norm_ppf(0.5 + level / 2.0))
    se_mean = sd / math.sqrt(n)
    se_limit = math.sqrt(3.0 * sd * sd / n)
    low = mean_d - z * sd
    high = mean_d + z * sd
    slope, slope_low, slope_high, p = _trend(d, (x + y) / 2.0, level)
    return Agreement(
        scale=scale,
        n=n,
        mean_difference=mean_d,
        mean_difference_ci_low=mean_d - t * se_mean,
        mean_difference_ci_high=mean_d + t * se_mean,
        sd_difference=sd,
        limit_low=low,
        limit_high=high,
        limit_low_ci_low=low - t * se_limit,
        limit_low_ci_high=low + t * se_limit,
        limit_high_ci_low=high - t * se_limit,
        limit_high_ci_high=high + t * se_limit,
        limit_se=se_limit,
        multiplier=z,
        trend_slope=slope,
        trend_slope_ci_low=slope_low,
        trend_slope_ci_high=slope_high,
        trend_p_value=p,
        trend_flag=bool(math.isfinite(p) and p < 1.0 - level),
        method=LIMIT_SE_TEXT,
    )


def _trend(d: NDArray[np.float64], mean: NDArray[np.float64], level: float) -> tuple[float, float, float, float]:
    """Least-squares slope of the differences on the means, its interval and two-sided p."""
    n = d.size
    dm = mean - mean.mean()
    sxx = float(dm @ dm)
    if sxx == 0.0 or n < 3:
        return math.nan, math.nan, math.nan, math.nan
    dd = d - d.mean()
    slope = float(dm @ dd) / sxx
    resid = dd - slope * dm
    s2 = float(resid @ resid) / (n - 2)
    se = math.sqrt(s2 / sxx)
    t = t_ppf(0.5 + level / 2.0, n - 2)
    if se == 0.0:  # the differences lie exactly on a line
        return slope, slope, slope, 0.0 if slope != 0.0 else 1.0
    p = float(2.0 * t_sf(abs(slope / se), n - 2))
    return slope, slope - t * se, slope + t * se, p
