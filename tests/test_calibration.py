"""Tests of sitegen.stats.calibration against a handbook example and independent computations."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Literal

import numpy as np
import pytest
from numpy.typing import NDArray
from scipy import optimize, stats

from sitegen.errors import FitError
from sitegen.stats.calibration import InversePrediction, detection_limits, inverse_predict

TEXTBOOK = Path(__file__).resolve().parent / "data" / "textbook"


@dataclass(frozen=True)
class Calib:
    """A straight calibration line fitted independently (scipy.stats.linregress + numpy)."""

    intercept: float
    slope: float
    residual_sd: float
    n: int
    x_mean: float
    sxx: float
    y_mean: float
    df_resid: int
    intercept_se: float


def _invert(
    line: Calib,
    *,
    level: float,
    responses: Sequence[float],
    readings: int = 1,
    interval: Literal["fieller", "classical"] = "fieller",
) -> tuple[InversePrediction, ...]:
    return inverse_predict(
        intercept=line.intercept,
        slope=line.slope,
        residual_sd=line.residual_sd,
        n=line.n,
        x_mean=line.x_mean,
        sxx=line.sxx,
        y_mean=line.y_mean,
        df_resid=line.df_resid,
        level=level,
        responses=responses,
        readings=readings,
        interval=interval,
    )


def _fit(x: NDArray[np.float64], y: NDArray[np.float64]) -> Calib:
    ref = stats.linregress(x, y)
    residuals = y - ref.intercept - ref.slope * x
    n = x.size
    return Calib(
        intercept=float(ref.intercept),
        slope=float(ref.slope),
        residual_sd=math.sqrt(float(residuals @ residuals) / (n - 2)),
        n=n,
        x_mean=float(x.mean()),
        sxx=float(((x - x.mean()) ** 2).sum()),
        y_mean=float(y.mean()),
        df_resid=n - 2,
        intercept_se=float(ref.intercept_stderr),
    )


def _fluorescence() -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    data = np.loadtxt(TEXTBOOK / "fluorescence_calibration.csv", delimiter=",", skiprows=1)
    return data[:, 0], data[:, 1]


def _invented(seed: int, slope: float, noise: float, n: int = 9) -> Calib:
    """Invented calibration of a nitrate probe at the water utility's lab."""
    rng = np.random.default_rng(seed)
    x = np.linspace(0.0, 40.0, n)
    return _fit(x, 0.4 + slope * x + rng.normal(0.0, noise, n))


def test_fluorescence_example_from_miller_and_miller() -> None:
    # Source: Miller & Miller, Statistics and Chemometrics for Analytical Chemistry,
    # fluorescence calibration worked example (data and printed results from memory;
    # numpy reproduces the remembered values from these data to their printed rounding).
    x, y = _fluorescence()
    line = _fit(x, y)
    assert round(line.slope, 2) == 1.93
    assert round(line.intercept, 2) == 1.52
    # numpy gives s_y/x = 0.432848…, which rounds to 0.4328; the remembered 0.4329 agrees
    # to 1e-4 (how the book rounded is not known to us).
    assert line.residual_sd == pytest.approx(0.4329, abs=1e-4)
    assert round(float(np.corrcoef(x, y)[0, 1]), 4) == 0.9989
    # Book (from memory): y0 → x0, s_x0, and 95 % limits x0 ± t(5 df)·s_x0 (t = 2.57).
    book = {2.9: (0.72, 0.26, 0.68), 13.5: (6.21, 0.24, 0.62), 23.0: (11.13, 0.26, 0.68)}
    got = _invert(line, level=0.95, responses=list(book), interval="classical")
    for result, (x0, s_x0, half) in zip(got, book.values(), strict=True):
        assert round(result.estimate, 2) == x0
        assert round(result.std_error, 2) == s_x0
        assert round((result.ci_high - result.ci_low) / 2, 2) == half
        assert result.readings == 1
        assert result.method == "classical"
        assert result.bounded


def test_fluorescence_detection_limit_from_miller_and_miller() -> None:
    # Source: Miller & Miller (from memory): with their convention LOD = y_B + 3·s_y/x
    # (y_B = a), the limit is 2.82 in signal, i.e. 3·s_y/x / b = 0.67 pg/ml. Ours is
    # the ICH Q2(R1) 3.3·s/b (common practice), 1.1 times theirs.
    line = _fit(*_fluorescence())
    assert round(line.intercept + 3 * line.residual_sd, 2) == 2.82
    limits = detection_limits(slope=line.slope, residual_sd=line.residual_sd, intercept_se=line.intercept_se)
    assert round(limits.lod / 1.1, 2) == 0.67
    assert limits.loq == pytest.approx(limits.lod * 10 / 3.3, rel=1e-12)
    assert "ICH Q2(R1)" in limits.convention
    assert "residual" in limits.basis


def _band_crossings(line: Calib, y0: float, readings: int, level: float) -> tuple[float, float]:
    """x where the prediction band for a mean of `readings` readings crosses y0, by brentq."""
    t = stats.t.ppf(0.5 + level / 2, line.n - 2)

    def half(x: float) -> float:
        c = 1 / readings + 1 / line.n + (x - line.x_mean) ** 2 / line.sxx
        return float(t * line.residual_sd * math.sqrt(c))

    def upper(x: float) -> float:
        return line.intercept + line.slope * x + half(x) - y0

    def lower(x: float) -> float:
        return line.intercept + line.slope * x - half(x) - y0

    x_hat = (y0 - line.intercept) / line.slope
    span = 1e3 * (1 + abs(x_hat) + math.sqrt(line.sxx))
    rising = line.slope > 0
    # Rising line: the left limit is where the upper band reaches y0; falling: the lower band.
    left = optimize.brentq(upper if rising else lower, x_hat - span, x_hat, xtol=1e-13, rtol=1e-15)
    right = optimize.brentq(lower if rising else upper, x_hat, x_hat + span, xtol=1e-13, rtol=1e-15)
    return float(left), float(right)


@pytest.mark.parametrize("readings", [1, 3])
@pytest.mark.parametrize("level", [0.9, 0.99])
@pytest.mark.parametrize(("seed", "slope", "noise"), [(1, 0.25, 0.3), (2, -1.5, 2.0), (3, 0.05, 0.25)])
def test_fieller_interval_inverts_the_prediction_band(
    seed: int, slope: float, noise: float, level: float, readings: int
) -> None:
    line = _invented(seed, slope, noise)
    responses = [line.intercept + slope * v for v in (-5.0, 2.0, 20.0, 39.0, 60.0)]
    results = _invert(line, level=level, responses=responses, readings=readings)
    for result in results:
        assert result.bounded
        assert result.method == "fieller"
        # Independent: brute-force inversion of the band with scipy.optimize.brentq.
        low, high = _band_crossings(line, result.response, readings, level)
        assert result.ci_low == pytest.approx(low, rel=1e-9, abs=1e-9)
        assert result.ci_high == pytest.approx(high, rel=1e-9, abs=1e-9)
        assert result.ci_low < result.estimate < result.ci_high


@pytest.mark.parametrize("readings", [1, 4])
def test_classical_interval_matches_direct_numpy(readings: int) -> None:
    line = _invented(4, 0.8, 0.6)
    responses = [3.0, 15.5, 30.0]
    results = _invert(line, level=0.95, responses=responses, readings=readings, interval="classical")
    # Independent: the classical formula written out with numpy, t from scipy.stats.
    y0 = np.array(responses)
    x0 = (y0 - line.intercept) / line.slope
    s_x0 = (line.residual_sd / abs(line.slope)) * np.sqrt(
        1 / readings + 1 / line.n + (y0 - line.y_mean) ** 2 / (line.slope**2 * line.sxx)
    )
    t = stats.t.ppf(0.975, line.n - 2)
    np.testing.assert_allclose([r.estimate for r in results], x0, rtol=1e-12)
    np.testing.assert_allclose([r.std_error for r in results], s_x0, rtol=1e-12)
    np.testing.assert_allclose([r.ci_low for r in results], x0 - t * s_x0, rtol=1e-12)
    np.testing.assert_allclose([r.ci_high for r in results], x0 + t * s_x0, rtol=1e-12)
    # Fieller reports the same estimate and standard error; only the limits differ.
    fieller = _invert(line, level=0.95, responses=responses, readings=readings)
    np.testing.assert_allclose([r.std_error for r in fieller], s_x0, rtol=1e-12)


def test_fieller_is_unbounded_when_the_slope_is_not_significant() -> None:
    line = _invented(5, 0.002, 1.0)
    level = 0.95
    # Independent: scipy.stats.linregress p-value says the slope is not significant,
    # which is exactly when g = t²s²/(b²Sxx) ≥ 1.
    t = stats.t.ppf(0.975, line.n - 2)
    g = (t * line.residual_sd) ** 2 / (line.slope**2 * line.sxx)
    assert g >= 1
    (result,) = _invert(line, level=level, responses=[line.y_mean + 0.5])
    assert not result.bounded
    assert (result.ci_low, result.ci_high) == (-math.inf, math.inf)
    assert math.isfinite(result.estimate)
    assert math.isfinite(result.std_error)
    # Far-away x values are inside the band's inversion, so the set really is unbounded.
    for far in (-1e9, 1e9):
        gap = abs(result.response - line.intercept - line.slope * far)
        band = t * line.residual_sd * math.sqrt(1 + 1 / line.n + (far - line.x_mean) ** 2 / line.sxx)
        assert gap <= band


def test_exact_line_gives_a_zero_width_interval() -> None:
    x = np.arange(6.0)
    line = _fit(x, 2.0 + 0.5 * x)
    (result,) = _invert(replace(line, residual_sd=0.0), level=0.95, responses=[3.0])
    assert (result.estimate, result.std_error) == (2.0, 0.0)
    assert result.ci_low == pytest.approx(2.0)
    assert result.ci_high == pytest.approx(2.0)


def test_detection_limits_on_the_intercept_basis_and_falling_lines() -> None:
    # ICH Q2(R1) (common practice): LOD = 3.3·σ/slope, LOQ = 10·σ/slope.
    limits = detection_limits(slope=-2.0, residual_sd=0.5, intercept_se=0.3, basis="intercept_se")
    assert limits.lod == pytest.approx(3.3 * 0.3 / 2.0, rel=1e-12)
    assert limits.loq == pytest.approx(10 * 0.3 / 2.0, rel=1e-12)
    assert "intercept" in limits.basis
    with pytest.raises(FitError, match="flat"):
        detection_limits(slope=0.0, residual_sd=0.5, intercept_se=0.3)
    with pytest.raises(FitError, match="finite"):
        detection_limits(slope=1.0, residual_sd=math.nan, intercept_se=0.3)
    with pytest.raises(ValueError, match="basis"):
        detection_limits(slope=1.0, residual_sd=0.5, intercept_se=0.3, basis="blank")  # type: ignore[arg-type]


def test_inverse_predict_rejects_what_it_cannot_read_back() -> None:
    line = _invented(6, 0.8, 0.6)
    with pytest.raises(FitError, match="flat"):
        _invert(replace(line, slope=0.0), level=0.95, responses=[1.0])
    with pytest.raises(FitError, match="degree"):
        _invert(replace(line, df_resid=0), level=0.95, responses=[1.0])
    with pytest.raises(ValueError, match="y_mean"):
        _invert(replace(line, y_mean=line.y_mean + 1), level=0.95, responses=[1.0])
    with pytest.raises(ValueError, match="level"):
        _invert(line, level=1.0, responses=[1.0])
    with pytest.raises(ValueError, match="readings"):
        _invert(line, level=0.95, responses=[1.0], readings=0)
    with pytest.raises(ValueError, match="finite"):
        _invert(line, level=0.95, responses=[math.inf])
    with pytest.raises(ValueError, match="interval"):
        _invert(line, level=0.95, responses=[1.0], interval="wide")  # type: ignore[arg-type]
    assert _invert(line, level=0.95, responses=[]) == ()
