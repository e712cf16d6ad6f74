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

Weighted lines (:func:`inverse_predict_wls`, :func:`weighted_detection_limits`): the same
Fieller construction with the weighted fit's covariance of (a, b) and the variance of the
new reading given by its weight; the limits take σ as the standard deviation of one reading
at the lowest standard, s/√w₀.

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

__all__ = [
    "DetectionLimits",
    "InversePrediction",
    "ReadingVariance",
    "detection_limits",
    "inverse_predict",
    "inverse_predict_wls",
    "weighted_detection_limits",
]

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


@dataclass(frozen=True, slots=True)
class ReadingVariance:
    """The variance of a new reading's mean in units of σ² (the fit's residual variance at weight 1), as a
    quadratic in the x it is read at: ``c0 + c1·x + c2·x²`` over ``readings``.

    A reading of constant weight w₀ has variance σ²/(m·w₀): ``c0 = 1/w₀``. Under the weighting 1/x a reading at
    x has weight 1/x (``c1 = 1``), under 1/x² weight 1/x² (``c2 = 1``); under 1/y² the measured response ȳ₀
    fixes its weight, 1/ȳ₀² (``c0 = ȳ₀²``, given per response by the caller).
    """

    c0: float = 0.0
    c1: float = 0.0
    c2: float = 0.0
    words: str = ""


def inverse_predict_wls(
    *,
    intercept: float,
    slope: float,
    cov: tuple[tuple[float, float], tuple[float, float]],
    residual_var: float,
    df_resid: int,
    level: float,
    responses: Sequence[float],
    variances: Sequence[ReadingVariance],
    readings: int = 1,
) -> tuple[InversePrediction, ...]:
    """Fieller's interval for x read back through a weighted line, with the weighted fit's covariance.

    ``cov`` is the covariance matrix of (intercept, slope) (σ̂²·(XᵀWX)⁻¹), ``residual_var`` σ̂², the weighted
    residual variance on ``df_resid`` degrees of freedom, and ``variances[i]`` the variance of response i's
    reading as a function of x (:class:`ReadingVariance`). The interval is the set of x at which the
    prediction interval of a new reading (of that variance) covers ȳ₀ — Fieller's construction, exact under
    the weighted normal model::

        (ȳ₀ − a − b·x)² ≤ t²·(V₀₀ + 2V₀₁x + V₁₁x² + σ̂²(c0 + c1·x + c2·x²)/m)

    a quadratic inequality A·x² + B·x + C ≤ 0 with A = b² − t²(V₁₁ + σ̂²c2/m). For A > 0 the interval lies
    between its roots (x̂₀ = (ȳ₀ − a)/b always lies inside); for A ≤ 0 the slope is too uncertain and the
    set is unbounded (limits ±∞, ``bounded`` False). Without weights (c0 = 1, V = s²(XᵀX)⁻¹) this is the
    unweighted Fieller interval of :func:`inverse_predict`. The standard error is the delta-method
    approximation, √(V₀₀ + 2V₀₁x̂₀ + V₁₁x̂₀² + σ̂²(c0 + c1x̂₀ + c2x̂₀²)/m)/|b|.
    """
    if not all(_finite(v) for v in (intercept, slope, residual_var, *cov[0], *cov[1])):
        raise FitError("the weighted calibration line has non-finite coefficients, so it cannot be read back")
    if slope == 0.0:
        raise FitError("the calibration line is flat (slope 0), so a response cannot be turned back into x")
    if df_resid < 1:
        raise FitError("reading a calibration line backwards needs at least 1 residual degree of freedom")
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level!r}")
    if readings < 1:
        raise ValueError(f"readings must be at least 1, got {readings!r}")
    if len(variances) != len(responses):
        raise ValueError("one reading variance per response is needed")
    bad = [r for r in responses if not _finite(r)]
    if bad:
        raise ValueError(f"responses must be finite numbers, got {bad}")
    t = t_ppf(0.5 + level / 2.0, df_resid)
    t2 = t * t
    (v00, v01), (_, v11) = cov
    a, b, m = intercept, slope, float(readings)
    out: list[InversePrediction] = []
    for response, rv in zip(responses, variances, strict=True):
        y0 = float(response)
        d = y0 - a
        estimate = d / b
        var_new = residual_var * (rv.c0 + rv.c1 * estimate + rv.c2 * estimate * estimate) / m
        var_line = v00 + 2.0 * v01 * estimate + v11 * estimate * estimate
        std_error = math.sqrt(max(var_new + var_line, 0.0)) / abs(b)
        qa = b * b - t2 * (v11 + residual_var * rv.c2 / m)
        qb = -2.0 * b * d - t2 * (2.0 * v01 + residual_var * rv.c1 / m)
        qc = d * d - t2 * (v00 + residual_var * rv.c0 / m)
        disc = qb * qb - 4.0 * qa * qc
        if qa > 0.0 and disc >= 0.0:
            root = math.sqrt(disc)
            # the two roots without cancellation
            q = -0.5 * (qb + math.copysign(root, qb))
            r1, r2 = (q / qa, qc / q) if q != 0.0 else (-qb / (2 * qa), -qb / (2 * qa))
            low, high, bounded = min(r1, r2), max(r1, r2), True
        else:
            low, high, bounded = -math.inf, math.inf, False
        out.append(InversePrediction(y0, readings, estimate, std_error, low, high, "fieller", bounded))
    return tuple(out)


def weighted_detection_limits(*, slope: float, residual_sd: float, low_weight: float, low_x: float) -> DetectionLimits:
    """LOD and LOQ of a weighted line in x units: the ICH Q2(R1) form 3.3·σ₀/|b| and 10·σ₀/|b|, with σ₀ the
    standard deviation of one reading at the low end of the line, σ₀ = s/√w₀.

    A weighted line has no single residual standard deviation: its scale s is that of a reading of weight 1,
    and a reading of weight w has standard deviation s/√w. ICH Q2(R1) (§ 6.3, "based on the standard deviation
    of the response and the slope") asks for the standard deviation of the response where the limits lie, at
    the blank; a weighting of 1/x or 1/x² gives a blank infinite weight (no scatter at all), so the weight of
    a reading at the lowest standard, w₀ (the mean weight of its rows), stands in for the blank's: our rule,
    which takes the scatter not to shrink below the lowest standard (where the weighting is no longer
    supported by data) and so never makes the limits smaller than the lowest standard's scatter allows.
    Without weights (w₀ = 1) this is the unweighted ICH limit of :func:`detection_limits`. σ₀² is also the prediction
    variance of one new reading of weight w₀ less the variance of the fitted mean (tested against statsmodels
    WLS ``get_prediction(..., weights=w₀)``).
    """
    if not (_finite(slope) and _finite(residual_sd) and _finite(low_weight)):
        raise FitError("detection limits need a finite slope, scale and weight")
    if slope == 0.0:
        raise FitError("the calibration line is flat (slope 0), so it has no detection limit")
    if low_weight <= 0.0 or residual_sd < 0.0:
        raise FitError("detection limits need a positive weight at the lowest standard")
    sigma0 = residual_sd / math.sqrt(low_weight)
    lod = 3.3 * sigma0 / abs(slope)
    below = (
        "; the limits lie below the lowest standard, where no data check the scatter: confirm them with blanks "
        "or low-level samples"
        if lod < low_x
        else ""
    )
    return DetectionLimits(
        lod=lod,
        loq=10.0 * sigma0 / abs(slope),
        convention=_ICH_CONVENTION,
        basis=(
            f"σ = s/√w₀, the standard deviation of one reading at the lowest standard (x = {low_x:g}), from "
            f"the weighted line's scale s and the weight w₀ of a reading there{below}"
        ),
    )
