"""Bias of a method under test at chosen levels, read from a comparison line.

With y the method under test and x the reference, a line y = a + b·x says that at
a level X the test method reads a + b·X, so its expected bias there is
B(X) = a + (b − 1)·X (absolute) and 100·B(X)/X (percent of the level).

The interval depends on the line (each is the interval that line's own method gives):

``ols``             the t interval for the mean response at X (on n − 2 degrees of
                    freedom), minus X: exactly the confidence interval of the fitted
                    mean that statsmodels' ``get_prediction(...).conf_int()`` gives.
``passing_bablok``  percentile bootstrap of a + (b − 1)·X over 1,000 resamples of the
                    pairs from a fixed seed (the method has no closed-form interval for its
                    value at a level; CLSI EP09 uses the bootstrap here, from memory), up to
                    :data:`~sitegen.stats.passing_bablok.BOOTSTRAP_MAX_POINTS` pairs. Above,
                    :func:`~sitegen.stats.passing_bablok.rank_value_interval`: the slope's
                    rank-based interval combined (Bonferroni) with the order-statistic
                    interval of the median that sets the line's value at X — no resampling,
                    conservative. The paper's own intercept construction, applied to x − X,
                    only carries the slope's uncertainty and so shrinks to nothing at the
                    centre of the data: it is not used.
``deming`` etc.     delete-one jackknife standard error of a + (b − 1)·X, centred on
                    the estimate, t on n − 1 df (as :mod:`sitegen.stats.lines` does for
                    the slope and intercept).

:func:`bias_at` is the one entry point; it takes the paired data (the intervals need
them) and any levels, so a requirement can ask for levels of its own.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.stats.distributions import t_ppf
from sitegen.stats.lines import LINE_METHODS, alternative_lines, leave_one_out
from sitegen.stats.passing_bablok import BOOTSTRAP_MAX_POINTS, bootstrap_values, passing_bablok, rank_value_interval

__all__ = ["BIAS_METHODS", "Bias", "bias_at"]

BIAS_METHODS = ("ols", "passing_bablok", *(m for m in LINE_METHODS if m != "ols"))
FloatArray = NDArray[np.float64]


@dataclass(frozen=True, slots=True)
class Bias:
    """Expected bias of the method under test at one level, with its interval."""

    at: float
    estimate: float
    ci_low: float
    ci_high: float
    percent: float  # NaN at a level of 0
    percent_ci_low: float
    percent_ci_high: float
    line: str  # the method of the line it was read from


def _percent(value: float, at: float) -> float:
    return 100.0 * value / at if at != 0.0 else math.nan


def _make(at: float, estimate: float, low: float, high: float, line: str) -> Bias:
    lo_p, hi_p = _percent(low, at), _percent(high, at)
    if at < 0.0:
        lo_p, hi_p = hi_p, lo_p
    return Bias(at, estimate, low, high, _percent(estimate, at), lo_p, hi_p, line)


def bias_at(
    x: FloatArray,
    y: FloatArray,
    levels: Sequence[float],
    *,
    method: str,
    level: float,
    error_ratio: float = 1.0,
) -> tuple[Bias, ...]:
    """The bias at each of ``levels`` from the ``method`` line of y (test) on x (reference)."""
    if method not in BIAS_METHODS:
        raise ValueError(f"unknown line method {method!r}; known: {', '.join(BIAS_METHODS)}")
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level!r}")
    bad = [v for v in levels if not math.isfinite(v)]
    if bad:
        raise ValueError(f"levels must be finite numbers, got {bad}")
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if not levels:
        return ()
    if method == "passing_bablok":
        return _passing_bablok(x, y, levels, level)
    if method == "ols":
        return _ols(x, y, levels, level)
    return _jackknife(x, y, levels, method, level=level, error_ratio=error_ratio)


def _ols(x: FloatArray, y: FloatArray, levels: Sequence[float], level: float) -> tuple[Bias, ...]:
    (line,) = alternative_lines(x, y, ("ols",), error_ratio=1.0, level=level)
    n = x.size
    dx = x - x.mean()
    sxx = float(dx @ dx)
    resid = y - (line.intercept + line.slope * x)
    s = math.sqrt(float(resid @ resid) / (n - 2))
    t = t_ppf(0.5 + level / 2.0, n - 2)
    out = []
    for at in levels:
        est = line.intercept + (line.slope - 1.0) * at
        half = t * s * math.sqrt(1.0 / n + (at - float(x.mean())) ** 2 / sxx)
        out.append(_make(at, est, est - half, est + half, "ols"))
    return tuple(out)


def _passing_bablok(x: FloatArray, y: FloatArray, levels: Sequence[float], level: float) -> tuple[Bias, ...]:
    pb = passing_bablok(x, y, level=level)
    at = np.asarray(levels, dtype=np.float64)
    if x.size > BOOTSTRAP_MAX_POINTS:
        lows, highs = rank_value_interval(x, y, at, level=level)
    else:
        lows, highs = bootstrap_values(x, y, at, level=level)
    return tuple(
        _make(
            float(v),
            pb.intercept + (pb.slope - 1.0) * float(v),
            float(lo) - float(v),
            float(hi) - float(v),
            "passing_bablok",
        )
        for v, lo, hi in zip(at, lows, highs, strict=True)
    )


def _jackknife(
    x: FloatArray, y: FloatArray, levels: Sequence[float], method: str, *, level: float, error_ratio: float
) -> tuple[Bias, ...]:
    (line,) = alternative_lines(x, y, (method,), error_ratio=error_ratio, level=level)
    loo = leave_one_out(x, y, method, error_ratio=error_ratio)
    n = x.size
    t = t_ppf(0.5 + level / 2.0, n - 1)
    out = []
    for at in levels:
        est = line.intercept + (line.slope - 1.0) * at
        if loo is None:
            se = math.nan
        else:
            samples = loo[1] + (loo[0] - 1.0) * at
            se = math.sqrt(float(np.sum((samples - samples.mean()) ** 2)) * (n - 1.0) / n)
        if not math.isfinite(est):
            raise FitError(f"the {method} line gives no finite bias at {at:g}")
        out.append(_make(at, est, est - t * se, est + t * se, method))
    return tuple(out)
