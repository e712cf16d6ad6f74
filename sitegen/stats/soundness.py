"""Can these numbers be trusted at all? Checks before and after a fit that keep meaningless figures off a page.

A fit of numbers that floating point cannot hold gives figures that look like results and are not: a
response that never varies has no R² (0/0); values near 1e308 overflow in the sums of squares (a column of
±1.7e308 came out as R² = 1); values near 1e-300 underflow to zero in them (a slope's standard error of 0, a
p-value of 0); a slope of 1e300 per unit of a 1e-300 column has an infinite standard error. Such a dataset is
an ``error`` with the reason and what to do, never ``ok`` with the figure.

The limits are those of IEEE 754 double precision (common practice): the largest finite number is about
1.8e308 and the smallest normal one about 2.2e-308, so a sum of squares stays representable while the values'
spread lies roughly between 1e-154 and 1e154.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import NDArray

_TINY = float(np.finfo(np.float64).tiny)
RESCALE = (
    "express the column in another unit (e.g. thousands, or millionths) so its values lie between about "
    "1e-150 and 1e150"
)


def _spread(values: NDArray[np.float64]) -> tuple[float, float]:
    """(sum of squared deviations from the mean, largest magnitude), computed as the statistics are: in doubles."""
    with np.errstate(all="ignore"):
        v = np.asarray(values, dtype=np.float64)
        mean = float(np.sum(v) / v.size) if v.size else 0.0
        d = v - mean
        return float(np.dot(d, d)), float(np.max(np.abs(v))) if v.size else 0.0


def data_problem(
    response: str,
    y: NDArray[np.float64],
    terms: Sequence[str],
    X: NDArray[np.float64],
    has_intercept: bool,
) -> str | None:
    """Why the fitted data cannot give trustworthy figures, or None. Checks the response and every column of
    the design (the intercept's column of ones aside)."""
    if y.size < 2:  # too few rows: said where the fit is made
        return None
    ss, top = _spread(y)
    if has_intercept and float(np.max(y)) == float(np.min(y)):
        return (
            f"the response {response} has the same value ({float(y[0]):g}) in every row used, so there is no "
            "variation for the line to explain: R² is undefined and the fit cannot be judged"
        )
    if not has_intercept and not bool(np.any(y)):
        return f"the response {response} is zero in every row used: R² is undefined and the fit cannot be judged"
    problem = _column_problem(f"the response {response}", ss, top)
    if problem:
        return problem
    for j, term in enumerate(terms):
        if term == "Intercept":
            continue
        col = X[:, j]
        if float(np.max(col)) == float(np.min(col)):
            continue  # a constant predictor is reported where the design is checked
        problem = _column_problem(f"the model term {term}", *_spread(col))
        if problem:
            return problem
    return None


def _column_problem(what: str, ss: float, top: float) -> str | None:
    if not math.isfinite(ss):
        return (
            f"{what} has values (up to {top:.3g} in size) too large to compute with: the sum of their squares "
            "exceeds the largest floating-point number (about 1.8e308)"
        )
    if ss < _TINY:
        return (
            f"{what} varies by amounts (values up to {top:.3g} in size) too small to compute with: the sum of "
            "their squared deviations falls below the smallest normal floating-point number (about 2.2e-308)"
        )
    return None


def figures_problem(
    r_squared: float | None,
    residual_sd: float | None,
    coefficients: Sequence[tuple[str, float, float, float, float]],
) -> str | None:
    """Why the fitted figures are meaningless, or None. ``coefficients``: (term, estimate, std_error, ci_low,
    ci_high) each."""
    if r_squared is None or not math.isfinite(r_squared):
        return "R² cannot be computed from these values (it is undefined), so the fit cannot be judged"
    if residual_sd is None or not math.isfinite(residual_sd):
        return "the residual standard error is beyond the range of floating-point numbers"
    for term, estimate, se, low, high in coefficients:
        if not math.isfinite(estimate):
            return f"the estimate of {term} is beyond the range of floating-point numbers (about ±1.8e308)"
        if not (math.isfinite(se) and math.isfinite(low) and math.isfinite(high)):
            return f"the standard error of {term} ({se:g}) is beyond the range of floating-point numbers"
        if se == 0 and residual_sd > 0:
            return f"the standard error of {term} underflows to zero although the points scatter about the line"
    return None
