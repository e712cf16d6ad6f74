"""Calibration standards read back from their own line, the weighting choice and the linearity test.

Read-back: each standard's response y is turned back into x through the line,
x̂ = (y − a)/b, and compared with its nominal value: 100·(x̂ − x)/x percent (no
percent for a nominal value of 0). Standards are grouped by nominal value; a level's
result is the mean of its replicates' read-back values.

Weighting choice (common practice in bioanalytical laboratories): fit the line
unweighted and with weights 1/x and 1/x² (1/y² instead where some x is zero or
negative, since 1/x cannot be formed there), read every standard back, and choose the
weighting with the smallest sum of absolute read-back percent errors, Σ|%RE|. This is
the criterion of Almeida, Castel-Branco & Falcão, *Linear regression for calibration
lines revisited: weighting schemes for bioanalytical methods*, J. Chromatogr. B 2002
(774:215–222) (from memory); the acceptance of read-back standards within ±15 % of
nominal (±20 % at the lowest level) is that of the FDA's *Bioanalytical Method
Validation* guidance (2018) and ICH M10 (2022). Ties go to the simpler weighting, in
the order listed.

Linearity: Mandel's fitting test (J. Mandel, *The Statistical Analysis of Experimental
Data*, 1964), the test of ISO 8466-1:1990 and DIN 38402-51 for calibration functions:
with the residual sums of squares of the straight line (N − 2 df) and of the quadratic
(N − 3 df), PG = (SSR₁ − SSR₂)/(SSR₂/(N − 3)) is compared with F(1, N − 3) at 99 %, the
probability ISO 8466-1 uses (from memory). PG above it means the quadratic describes the
standards significantly better than the line. Weighted fits use weighted sums.

These are closed-form weighted least-squares sums in numpy (a straight line and a
quadratic); the page's own fit is still :func:`sitegen.stats.ols.fit_ols` with the
chosen weights.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.model import LinearityCheck as LinearityTest
from sitegen.model import ReadBackLevel as ReadBack
from sitegen.model import WeightingOption
from sitegen.stats.distributions import f_ppf, f_sf
from sitegen.stats.solver import ops, residual_ss

__all__ = [
    "LinearityTest",
    "ReadBack",
    "WeightingChoice",
    "WeightingOption",
    "choose_weighting",
    "mandel_test",
    "read_back",
    "weights_for",
]

FloatArray = NDArray[np.float64]
MANDEL_LEVEL = 0.99
WEIGHTINGS = ("none", "1/x", "1/x²", "1/y²")


@dataclass(frozen=True, slots=True)
class WeightingChoice:
    """The candidates compared and the one chosen, with the reason in words."""

    options: tuple[WeightingOption, ...]
    chosen: str
    reason: str


def weights_for(weighting: str, x: FloatArray, y: FloatArray) -> FloatArray | None:
    """The weights of a named weighting (None for unweighted); FitError where they cannot be formed."""
    if weighting == "none":
        return None
    if weighting in ("1/x", "1/x²"):
        if bool(np.any(x <= 0.0)):
            raise FitError(f"weighting {weighting} needs every x above zero")
        return 1.0 / x if weighting == "1/x" else 1.0 / (x * x)
    if weighting == "1/y²":
        if bool(np.any(y == 0.0)):
            raise FitError("weighting 1/y² needs every response different from zero")
        return 1.0 / (y * y)
    raise ValueError(f"unknown weighting {weighting!r}; known: {', '.join(WEIGHTINGS)}")


def _line(x: FloatArray, y: FloatArray, w: FloatArray | None) -> tuple[float, float]:
    """Weighted least-squares intercept and slope."""
    ww = np.ones_like(x) if w is None else w
    sw = float(ww.sum())
    xm = float(ww @ x) / sw
    ym = float(ww @ y) / sw
    dx = x - xm
    sxx = float(ww @ (dx * dx))
    if sxx == 0.0:
        raise FitError("all standards have the same nominal value, so no calibration line can be fitted")
    b = float(ww @ (dx * (y - ym))) / sxx
    return ym - b * xm, b


def read_back(nominal: FloatArray, response: FloatArray, *, intercept: float, slope: float) -> tuple[ReadBack, ...]:
    """Every standard level read back from the line y = intercept + slope·x."""
    if slope == 0.0 or not (math.isfinite(slope) and math.isfinite(intercept)):
        raise FitError("the calibration line is flat or not finite, so the standards cannot be read back")
    x = np.asarray(nominal, dtype=np.float64)
    found = (np.asarray(response, dtype=np.float64) - intercept) / slope
    out = []
    for level in np.unique(x):
        sel = x == level
        each = found[sel]
        mean = float(each.mean())
        lv = float(level)
        pct_each = tuple(100.0 * (v - lv) / lv if lv != 0.0 else math.nan for v in each.tolist())
        out.append(
            ReadBack(
                nominal=lv,
                replicates=int(sel.sum()),
                found=mean,
                percent=100.0 * (mean - lv) / lv if lv != 0.0 else math.nan,
                deviation=mean - lv,
                found_each=tuple(each.tolist()),
                percent_each=pct_each,
            )
        )
    return tuple(out)


def _percent_errors(x: FloatArray, y: FloatArray, a: float, b: float) -> FloatArray:
    nz = x != 0.0
    found = (y[nz] - a) / b
    return np.asarray(100.0 * (found - x[nz]) / x[nz], dtype=np.float64)


def candidate_weightings(x: FloatArray, y: FloatArray) -> tuple[str, ...]:
    """The weightings compared for these standards."""
    if bool(np.all(x > 0.0)):
        return ("none", "1/x", "1/x²")
    if bool(np.all(y != 0.0)):
        return ("none", "1/y²")
    return ("none",)


def choose_weighting(x: FloatArray, y: FloatArray) -> WeightingChoice:
    """Compare the candidate weightings by Σ|%RE| of the read-back standards and choose one."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.size < 3:
        raise FitError(f"choosing a weighting needs at least 3 standards, got {x.size}")
    if not bool(np.any(x != 0.0)):
        raise FitError("every standard has nominal value 0, so no read-back percent error exists")
    scored = []
    for name in candidate_weightings(x, y):
        a, b = _line(x, y, weights_for(name, x, y))
        if b == 0.0:
            raise FitError("the calibration line is flat (slope 0), so the standards cannot be read back")
        err = np.abs(_percent_errors(x, y, a, b))
        scored.append((name, a, b, float(err.sum()), float(err.max())))
    best = min(range(len(scored)), key=lambda i: (scored[i][3], i))
    options = tuple(
        WeightingOption(name, b, a, total, worst, i == best) for i, (name, a, b, total, worst) in enumerate(scored)
    )
    chosen = options[best]
    names = {"none": "unweighted"}
    others = ", ".join(
        f"{names.get(o.weighting, o.weighting)} {o.sum_abs_percent:.3g} %" for o in options if not o.chosen
    )
    if len(options) == 1:
        reason = (
            "Only the unweighted line could be compared: weights 1/x and 1/y² cannot be formed for these "
            "standards (a zero nominal value and a zero response)."
        )
    else:
        what = "The unweighted line" if chosen.weighting == "none" else f"Weighting {chosen.weighting}"
        reason = (
            f"{what} reads the standards back best: the sum of absolute read-back "
            f"errors is {chosen.sum_abs_percent:.3g} % (against {others})."
        )
    return WeightingChoice(options, chosen.weighting, reason)


def _ssr(x: FloatArray, y: FloatArray, w: FloatArray | None, degree: int) -> float:
    """Residual sum of squares of the polynomial of ``degree``, by the fit's own solver (scaled,
    extended-precision QR, refined), so that Mandel's difference SSR₁ − SSR₂ keeps its digits."""
    o = ops()
    sw = o.of(np.ones_like(x)) if w is None else o.sqrt(o.of(w))
    scale = float(np.max(np.abs(x))) or 1.0
    u = o.of(x) / scale
    cols = [o.of(np.ones_like(x))]
    for _ in range(degree):
        cols.append(cols[-1] * u)
    X = o.columns(cols) * sw[:, None]
    try:
        return residual_ss(X, o.of(y) * sw, tuple(f"x^{k}" for k in range(degree + 1)))
    except FitError:  # dependent columns (too few distinct levels): least squares in float64 as a fallback
        Xf = o.f(X)
        beta, *_ = np.linalg.lstsq(Xf, o.f(o.of(y) * sw), rcond=None)
        r = o.f(o.of(y) * sw) - Xf @ beta
        return float(r @ r)


def mandel_test(x: FloatArray, y: FloatArray, weights: FloatArray | None = None) -> LinearityTest:
    """Mandel's test of the straight line against the quadratic (ISO 8466-1 / DIN 38402-51)."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n = int(x.size)
    if n < 4 or np.unique(x).size < 3:
        raise FitError(
            f"the linearity test needs at least 4 standards at 3 or more levels, got {n} at {np.unique(x).size}"
        )
    ssr1 = _ssr(x, y, weights, 1)
    ssr2 = _ssr(x, y, weights, 2)
    df = n - 3
    crit = f_ppf(MANDEL_LEVEL, 1, df)
    if ssr2 <= 0.0:
        stat = math.inf if ssr1 > 0.0 else 0.0
        p = 0.0 if ssr1 > 0.0 else 1.0
    else:
        stat = max(ssr1 - ssr2, 0.0) / (ssr2 / df)
        p = float(f_sf(stat, 1, df))
    linear = not stat > crit
    if linear:
        text = (
            f"The straight line is adequate: a quadratic does not describe the standards significantly better "
            f"(Mandel's test, PG = {stat:.3g} ≤ F = {crit:.3g} at 99 %)."
        )
    else:
        text = (
            f"The standards curve: a quadratic describes them significantly better than the straight line "
            f"(Mandel's test, PG = {stat:.3g} > F = {crit:.3g} at 99 %). Narrow the working range or use a "
            "quadratic calibration function."
        )
    return LinearityTest(n, ssr1, ssr2, stat, df, crit, p, MANDEL_LEVEL, linear, text)
