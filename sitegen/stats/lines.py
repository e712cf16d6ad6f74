"""Straight lines for data whose x values also carry measurement error.

Ordinary least squares treats x as exact. When both columns are measured (two
instruments compared, a sensor against a reference), other lines through the mean
point are just as defensible; this module fits them side by side:

``ols``             y on x (x taken as exact)
``reverse``         x on y, written as y = a + b·x (y taken as exact): b = Syy/Sxy
``orthogonal``      smallest perpendicular distances (Deming regression with λ = 1)
``deming``          Deming regression, λ = var(y error) / var(x error):
                    b = (Syy − λSxx + √((Syy − λSxx)² + 4λSxy²)) / (2Sxy)
``geometric_mean``  sign(Sxy)·√(Syy/Sxx), the geometric mean of the ols and reverse slopes

Every line passes through the mean point: a = ȳ − b·x̄.

Intervals: OLS gets the classical t interval (n − 2 degrees of freedom). The other
lines get a delete-one jackknife standard error, centred on the full-sample
estimate, with a t quantile on n − 1 degrees of freedom (common practice for
Deming regression; Linnet 1990, from memory). The jackknife is deterministic, so
results repeat exactly without a random seed. Leave-one-out sums are down-dated in
closed form, so the cost is O(n), not O(n²).

Degenerate data: fewer than 3 points or constant x raise :class:`FitError`; so do
constant y or no linear association (Sxy ≈ 0) when any line other than ``ols`` is
asked for. When the full data are fine but deleting one point leaves a sample
without a line (for example x = 0, 0, 0, 1), the jackknife limits are NaN and
``interval_method`` says why. Invalid arguments (unknown method, level outside
(0, 1), error ratio not positive) are caller bugs and raise ``ValueError``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.stats.distributions import t_ppf

__all__ = ["LINE_METHODS", "Line", "alternative_lines", "explain_lines"]

LINE_METHODS = ("ols", "reverse", "orthogonal", "deming", "geometric_mean")

# Sxy is taken as zero when |r| is below this: the slope of x on y is then meaningless.
_ZERO_CORRELATION = 1e-12
# A leave-one-out sum of squares this small relative to the full one counts as zero.
_DOWNDATE_TOLERANCE = 1e-10

_JACKKNIFE_TEXT = "jackknife standard error (delete-one), centred on the estimate, t with n−1 df"
_OLS_TEXT = "classical t interval, n−2 df"


@dataclass(frozen=True, slots=True)
class Line:
    """One fitted line y = intercept + slope·x with its confidence limits."""

    method: str
    label: str
    slope: float
    intercept: float
    slope_ci_low: float
    slope_ci_high: float
    intercept_ci_low: float
    intercept_ci_high: float
    interval_method: str


def _label(method: str, error_ratio: float) -> str:
    if method == "ols":
        return "y on x (x taken as exact)"
    if method == "reverse":
        return "x on y, turned round (y taken as exact)"
    if method == "orthogonal":
        return "shortest perpendicular distances (equal errors in x and y)"
    if method == "deming":
        return f"Deming, error variance in y = {error_ratio:g} × error variance in x"
    return "geometric mean of the y-on-x and x-on-y slopes"


def _slopes(
    method: str, sxx: NDArray[np.float64], syy: NDArray[np.float64], sxy: NDArray[np.float64], lam: float
) -> NDArray[np.float64]:
    """Slope of one method from (possibly vectors of) centred sums of squares and products."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "ols":
            return sxy / sxx
        if method == "reverse":
            return syy / sxy
        if method == "geometric_mean":
            return np.sign(sxy) * np.sqrt(syy / sxx)
        ratio = 1.0 if method == "orthogonal" else lam
        d = syy - ratio * sxx
        root = np.sqrt(d * d + 4.0 * ratio * sxy * sxy)
        # Two algebraically equal forms; each avoids cancellation for its sign of d.
        plus = (d + root) / (2.0 * sxy)
        minus = 2.0 * ratio * sxy / (root - d)
        return np.where(d >= 0.0, plus, minus)


def _t_quantile(df: int, level: float) -> float:
    return t_ppf(0.5 + level / 2.0, df)


def _check_arguments(x: NDArray[np.float64], y: NDArray[np.float64], methods: Sequence[str]) -> None:
    unknown = [m for m in methods if m not in LINE_METHODS]
    if unknown:
        raise ValueError(f"unknown line method(s) {unknown}; known: {', '.join(LINE_METHODS)}")
    if len(set(methods)) != len(methods):
        raise ValueError(f"line methods repeat: {list(methods)}")
    if x.ndim != 1 or y.ndim != 1 or x.shape != y.shape:
        raise ValueError(f"x and y must be 1-D arrays of equal length, got shapes {x.shape} and {y.shape}")


def alternative_lines(
    x: NDArray[np.float64],
    y: NDArray[np.float64],
    methods: Sequence[str],
    *,
    error_ratio: float,
    level: float,
) -> tuple[Line, ...]:
    """Fit the requested lines to paired measurements, in the order asked.

    ``error_ratio`` is λ = var(y error) / var(x error), used by ``deming`` only.
    ``level`` is the confidence level of every interval, e.g. 0.95.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    _check_arguments(x, y, methods)
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level!r}")
    if not (math.isfinite(error_ratio) and error_ratio > 0.0):
        raise ValueError(f"error_ratio must be a positive finite number, got {error_ratio!r}")
    if not methods:
        return ()

    n = x.size
    if n < 3:
        raise FitError(f"a line with confidence limits needs at least 3 points, got {n}")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise FitError("x and y must hold finite numbers only (no blanks, NaN or infinity)")
    if np.ptp(x) == 0.0:
        raise FitError("all x values are equal, so no line can be fitted")

    x_mean = float(np.mean(x))
    y_mean = float(np.mean(y))
    dx = x - x_mean
    dy = y - y_mean
    sxx = float(dx @ dx)
    syy = float(dy @ dy)
    sxy = float(dx @ dy)
    if any(m != "ols" for m in methods):
        if np.ptp(y) == 0.0:
            raise FitError("all y values are equal, so only the y-on-x line exists")
        if abs(sxy) <= _ZERO_CORRELATION * math.sqrt(sxx * syy):
            raise FitError(
                "x and y show no linear association (correlation 0), so lines other than y on x are undefined"
            )

    # Leave-one-out means and centred sums (down-dating: S_(i) = S − n/(n−1)·d_i·e_i).
    k = n / (n - 1.0)
    loo_xmean = (n * x_mean - x) / (n - 1.0)
    loo_ymean = (n * y_mean - y) / (n - 1.0)
    loo_sxx = sxx - k * dx * dx
    loo_syy = syy - k * dy * dy
    loo_sxy = sxy - k * dx * dy
    degenerate = bool(
        np.any(loo_sxx <= _DOWNDATE_TOLERANCE * sxx)
        or np.any(loo_syy <= _DOWNDATE_TOLERANCE * syy)
        or np.any(np.abs(loo_sxy) <= _ZERO_CORRELATION * np.sqrt(np.abs(loo_sxx * loo_syy)))
    )

    full = (np.array([sxx]), np.array([syy]), np.array([sxy]))
    lines: list[Line] = []
    for method in methods:
        slope = float(_slopes(method, *full, error_ratio)[0])
        intercept = y_mean - slope * x_mean
        if method == "ols":
            residual = dy - slope * dx
            s = math.sqrt(float(residual @ residual) / (n - 2))
            t = _t_quantile(n - 2, level)
            se_slope = s / math.sqrt(sxx)
            se_intercept = s * math.sqrt(1.0 / n + x_mean * x_mean / sxx)
            interval_method = _OLS_TEXT
        elif degenerate:
            t = se_slope = se_intercept = math.nan
            interval_method = (
                _JACKKNIFE_TEXT + "; not available: leaving out one point leaves too little spread for a line"
            )
        else:
            loo_slope = _slopes(method, loo_sxx, loo_syy, loo_sxy, error_ratio)
            loo_intercept = loo_ymean - loo_slope * loo_xmean
            t = _t_quantile(n - 1, level)
            # Jackknife variance: (n−1)/n · Σ(θ_(i) − mean of θ_(i))².
            se_slope = math.sqrt(float(np.sum((loo_slope - loo_slope.mean()) ** 2)) / k)
            se_intercept = math.sqrt(float(np.sum((loo_intercept - loo_intercept.mean()) ** 2)) / k)
            interval_method = _JACKKNIFE_TEXT
        lines.append(
            Line(
                method=method,
                label=_label(method, error_ratio),
                slope=slope,
                intercept=intercept,
                slope_ci_low=slope - t * se_slope,
                slope_ci_high=slope + t * se_slope,
                intercept_ci_low=intercept - t * se_intercept,
                intercept_ci_high=intercept + t * se_intercept,
                interval_method=interval_method,
            )
        )
    return tuple(lines)


def explain_lines(lines: Sequence[Line], r: float) -> str:
    """One or two plain sentences on why the given lines differ, for correlation ``r``."""
    if not (math.isfinite(r) and -1.0 <= r <= 1.0):
        raise ValueError(f"r must be a correlation between −1 and 1, got {r!r}")
    methods = {line.method for line in lines}
    if len(methods) < 2:
        return "Only one line is drawn, so there is nothing to compare."
    r2 = r * r
    if r2 == 1.0:
        return "The points lie exactly on a straight line, so every method gives the same line."
    if {"ols", "reverse"} <= methods:
        first = (
            f"The y-on-x slope is r² = {r2:.3g} times the x-on-y slope turned round, "
            "and the other lines lie between these two."
        )
    else:
        first = (
            "All these lines pass through the mean point; they differ in how much of the scatter "
            "they put down to error in x rather than in y."
        )
    second = f"Here r = {r:.3g}; the weaker the correlation, the wider the gap between the lines"
    if "orthogonal" in methods:
        second += ", and the perpendicular-distance line also shifts when x or y changes units"
    return f"{first} {second}."


def leave_one_out(
    x: NDArray[np.float64], y: NDArray[np.float64], method: str, *, error_ratio: float
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """Slopes and intercepts of ``method`` with each point left out in turn (the jackknife's samples).

    None when leaving out a point leaves too little spread for a line (the same rule as
    :func:`alternative_lines`).
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n = x.size
    if method not in LINE_METHODS or n < 3:
        raise ValueError(f"leave_one_out needs a known method and at least 3 points, got {method!r} and {n}")
    x_mean = float(np.mean(x))
    y_mean = float(np.mean(y))
    dx = x - x_mean
    dy = y - y_mean
    sxx = float(dx @ dx)
    syy = float(dy @ dy)
    sxy = float(dx @ dy)
    k = n / (n - 1.0)
    loo_sxx = sxx - k * dx * dx
    loo_syy = syy - k * dy * dy
    loo_sxy = sxy - k * dx * dy
    if bool(
        np.any(loo_sxx <= _DOWNDATE_TOLERANCE * sxx)
        or np.any(loo_syy <= _DOWNDATE_TOLERANCE * syy)
        or np.any(np.abs(loo_sxy) <= _ZERO_CORRELATION * np.sqrt(np.abs(loo_sxx * loo_syy)))
    ):
        return None
    slopes = _slopes(method, loo_sxx, loo_syy, loo_sxy, error_ratio)
    intercepts = (n * y_mean - y) / (n - 1.0) - slopes * (n * x_mean - x) / (n - 1.0)
    return slopes, intercepts
