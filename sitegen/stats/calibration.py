"""Reading a straight calibration line y = a + b·x backwards.

Inverse prediction: a measured response ȳ₀ (the mean of ``readings`` = m readings)
is turned into x̂₀ = (ȳ₀ − a)/b. Its approximate standard error is the classical
one (common practice; e.g. Miller & Miller, *Statistics and Chemometrics for
Analytical Chemistry*)::

    s_x0 = (s/|b|)·√(1/m + 1/n + (ȳ₀ − ȳ)² / (b²·Sxx))

The confidence interval is Fieller's by default: the set of x whose prediction
band for a mean of m readings covers ȳ₀, exact under the normal model. With
g = t²s²/(b²·Sxx) it is::

    x̄ + (x̂₀ − x̄)/(1 − g) ± t·s/(|b|(1 − g)) · √((1 − g)(1/m + 1/n) + (ȳ₀ − ȳ)²/(b²·Sxx))

When g ≥ 1 the slope is not significantly different from zero at this level and
the set is unbounded (the whole line, or two half-lines): the limits are then
−∞ and +∞ and ``bounded`` is False. The ``"classical"`` interval is x̂₀ ± t·s_x0.

Detection and quantitation limits follow ICH Q2(R1) (common practice):
LOD = 3.3·σ/|b| and LOQ = 10·σ/|b|, with σ the residual standard deviation of the
line or, on request, the standard error of its intercept.

All formulas assume a line fitted with an intercept, so ``y_mean`` must equal
``intercept + slope·x_mean``. Data that cannot support the calculation (a flat
line, no residual degrees of freedom) raise :class:`FitError`; invalid settings
(level, readings, non-finite responses, unknown options) raise ``ValueError``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

from sitegen.errors import FitError
from sitegen.stats.distributions import t_ppf

__all__ = ["DetectionLimits", "InversePrediction", "detection_limits", "inverse_predict"]

# y_mean may differ from intercept + slope·x_mean by rounding only (relative to the terms' size).
_MEAN_POINT_TOLERANCE = 1e-8

_ICH_CONVENTION = "ICH Q2(R1): LOD = 3.3·σ/slope, LOQ = 10·σ/slope (common practice)"
_BASIS_TEXT = {
    "residual_sd": "σ = residual standard deviation of the calibration line",
    "intercept_se": "σ = standard error of the calibration line's intercept",
}


@dataclass(frozen=True, slots=True)
class InversePrediction:
    """The x value read back from one response, with its uncertainty."""

    response: float
    readings: int
    estimate: float
    std_error: float
    ci_low: float
    ci_high: float
    method: str
    bounded: bool


@dataclass(frozen=True, slots=True)
class DetectionLimits:
    """Limits of detection and quantitation, in x units."""

    lod: float
    loq: float
    convention: str
    basis: str


def _finite(value: float) -> bool:
    return math.isfinite(value)


def _check_line(
    *,
    intercept: float,
    slope: float,
    residual_sd: float,
    n: int,
    x_mean: float,
    sxx: float,
    y_mean: float,
    df_resid: int,
) -> None:
    if not all(_finite(v) for v in (intercept, slope, residual_sd, x_mean, sxx, y_mean)):
        raise FitError("the calibration line has non-finite coefficients or sums, so it cannot be read back")
    if slope == 0.0:
        raise FitError("the calibration line is flat (slope 0), so a response cannot be turned back into x")
    if n < 3 or df_resid < 1:
        raise FitError(
            f"reading a calibration line backwards needs at least 3 points and 1 residual degree "
            f"of freedom, got n = {n} and {df_resid}"
        )
    if residual_sd < 0.0 or sxx <= 0.0:
        raise FitError("the calibration line has a negative residual SD or no spread in x")
    scale = abs(y_mean) + abs(intercept) + abs(slope * x_mean)
    if abs(y_mean - (intercept + slope * x_mean)) > _MEAN_POINT_TOLERANCE * scale:
        raise ValueError(
            "y_mean must equal intercept + slope·x_mean: these formulas need a line fitted with an intercept"
        )


def inverse_predict(
    *,
    intercept: float,
    slope: float,
    residual_sd: float,
    n: int,
    x_mean: float,
    sxx: float,
    y_mean: float,
    df_resid: int,
    level: float,
    responses: Sequence[float],
    readings: int = 1,
    interval: Literal["fieller", "classical"] = "fieller",
) -> tuple[InversePrediction, ...]:
    """Turn each response (a mean of ``readings`` readings) back into an x value.

    ``residual_sd`` is s, the line's residual standard deviation on ``df_resid``
    degrees of freedom; ``sxx`` is Σ(x − x̄)² of the n calibration points.
    """
    _check_line(
        intercept=intercept,
        slope=slope,
        residual_sd=residual_sd,
        n=n,
        x_mean=x_mean,
        sxx=sxx,
        y_mean=y_mean,
        df_resid=df_resid,
    )
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level!r}")
    if readings < 1:
        raise ValueError(f"readings must be at least 1, got {readings!r}")
    if interval not in ("fieller", "classical"):
        raise ValueError(f"interval must be 'fieller' or 'classical', got {interval!r}")
    bad = [r for r in responses if not _finite(r)]
    if bad:
        raise ValueError(f"responses must be finite numbers, got {bad}")

    t = t_ppf(0.5 + level / 2.0, df_resid)
    s = residual_sd
    b = slope
    c = 1.0 / readings + 1.0 / n
    b2sxx = b * b * sxx
    g = (t * s) ** 2 / b2sxx

    results: list[InversePrediction] = []
    for response in responses:
        y0 = float(response)
        estimate = (y0 - intercept) / b
        d2 = (y0 - y_mean) ** 2 / b2sxx
        std_error = s / abs(b) * math.sqrt(c + d2)
        if interval == "classical":
            low, high, bounded = estimate - t * std_error, estimate + t * std_error, True
        elif g < 1.0:
            one_g = 1.0 - g
            centre = x_mean + (estimate - x_mean) / one_g
            half = t * s / (abs(b) * one_g) * math.sqrt(one_g * c + d2)
            low, high, bounded = centre - half, centre + half, True
        else:
            low, high, bounded = -math.inf, math.inf, False
        results.append(
            InversePrediction(
                response=y0,
                readings=readings,
                estimate=estimate,
                std_error=std_error,
                ci_low=low,
                ci_high=high,
                method=interval,
                bounded=bounded,
            )
        )
    return tuple(results)


def detection_limits(
    *,
    slope: float,
    residual_sd: float,
    intercept_se: float,
    basis: Literal["residual_sd", "intercept_se"] = "residual_sd",
) -> DetectionLimits:
    """LOD and LOQ in x units from a calibration line, ICH Q2(R1) convention.

    The slope's sign is ignored (a falling line detects as well as a rising one).
    """
    if basis not in _BASIS_TEXT:
        raise ValueError(f"basis must be 'residual_sd' or 'intercept_se', got {basis!r}")
    sigma = residual_sd if basis == "residual_sd" else intercept_se
    if not (_finite(slope) and _finite(sigma)):
        raise FitError("detection limits need a finite slope and standard deviation")
    if slope == 0.0:
        raise FitError("the calibration line is flat (slope 0), so it has no detection limit")
    if sigma < 0.0:
        raise FitError(f"a standard deviation cannot be negative, got {sigma!r}")
    return DetectionLimits(
        lod=3.3 * sigma / abs(slope),
        loq=10.0 * sigma / abs(slope),
        convention=_ICH_CONVENTION,
        basis=_BASIS_TEXT[basis],
    )
