"""Tests of sitegen.stats.lines against independent computations.

No published worked example of Deming or orthogonal regression is checked here:
none is known to us with certainty. Instead every line is recomputed another way
(scipy.odr, scipy.optimize, numpy closed forms and SVD, NIST StRD for OLS).
"""

from __future__ import annotations

import math
import warnings
from types import ModuleType

import numpy as np
import pytest
from nist_data import load_nist
from numpy.typing import NDArray
from scipy import optimize, stats

from sitegen.errors import FitError
from sitegen.stats.lines import LINE_METHODS, Line, alternative_lines, explain_lines

Array = NDArray[np.float64]


def _odr() -> ModuleType:
    # scipy.odr is deprecated since SciPy 1.17 (removed in 1.19): import it with
    # only that DeprecationWarning silenced, and skip once it is gone.
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r".*scipy\.odr.*deprecated", category=DeprecationWarning)
        module: ModuleType = pytest.importorskip("scipy.odr")
    return module


def _both_noisy(seed: int, n: int = 40, slope: float = 0.8, offset: float = 0.0) -> tuple[Array, Array]:
    """Invented method-comparison data: true values measured with error on both axes."""
    rng = np.random.default_rng(seed)
    truth = rng.uniform(5.0, 25.0, n)
    x = offset + truth + rng.normal(0.0, 1.5, n)
    y = 3.0 + slope * truth + rng.normal(0.0, 1.0, n)
    return x, y


def _one(x: Array, y: Array, method: str, *, error_ratio: float = 1.0, level: float = 0.95) -> Line:
    (line,) = alternative_lines(x, y, [method], error_ratio=error_ratio, level=level)
    return line


def _odr_line(x: Array, y: Array, sx: float, sy: float) -> tuple[float, float]:
    odr = _odr()
    ols = np.polyfit(x, y, 1)
    data = odr.RealData(x, y, sx=np.full_like(x, sx), sy=np.full_like(y, sy))
    fit = odr.ODR(data, odr.unilinear, beta0=[ols[0], ols[1]], maxit=1000, sstol=1e-15, partol=1e-15).run()
    return float(fit.beta[0]), float(fit.beta[1])


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_orthogonal_matches_scipy_odr_and_svd(seed: int) -> None:
    x, y = _both_noisy(seed)
    line = _one(x, y, "orthogonal")
    # Independent 1: scipy.odr with a straight-line model and equal weights on x and y.
    slope, intercept = _odr_line(x, y, 1.0, 1.0)
    assert line.slope == pytest.approx(slope, rel=1e-6)
    assert line.intercept == pytest.approx(intercept, rel=1e-6)
    # Independent 2: total least squares by SVD (numpy): the line's normal is the
    # right singular vector of the centred data with the smallest singular value.
    centred = np.column_stack([x - x.mean(), y - y.mean()])
    normal = np.linalg.svd(centred)[2][-1]
    assert line.slope == pytest.approx(-normal[0] / normal[1], rel=1e-10)


@pytest.mark.parametrize("error_ratio", [0.04, 0.5, 4.0, 30.0])
def test_deming_minimises_the_deming_criterion(error_ratio: float) -> None:
    x, y = _both_noisy(7)
    line = _one(x, y, "deming", error_ratio=error_ratio)
    # Independent: scipy.optimize.least_squares over (a, b, ξ₁ … ξₙ) of the Deming
    # criterion Σ[(y − a − bξ)²/λ + (x − ξ)²], no closed form used.
    root = math.sqrt(error_ratio)

    def residuals(p: Array) -> Array:
        a, b, xi = p[0], p[1], p[2:]
        return np.concatenate([(y - a - b * xi) / root, x - xi])

    b0, a0 = np.polyfit(x, y, 1)
    start = np.concatenate([[a0, b0], x])
    fit = optimize.least_squares(residuals, start, xtol=1e-15, ftol=1e-15, gtol=1e-15)
    assert line.slope == pytest.approx(fit.x[1], rel=1e-6)
    assert line.intercept == pytest.approx(fit.x[0], rel=1e-6)
    # Independent 2: scipy.odr with sy/sx = √λ.
    slope, intercept = _odr_line(x, y, 1.0, root)
    assert line.slope == pytest.approx(slope, rel=1e-6)
    assert line.intercept == pytest.approx(intercept, rel=1e-6)


def test_reverse_and_geometric_mean_match_numpy_closed_forms() -> None:
    x, y = _both_noisy(11, slope=-1.3)
    reverse, gm = alternative_lines(x, y, ["reverse", "geometric_mean"], error_ratio=1.0, level=0.9)
    # Independent: numpy.polyfit of x on y, solved for y.
    d, c = np.polyfit(y, x, 1)
    assert reverse.slope == pytest.approx(1.0 / d, rel=1e-12)
    assert reverse.intercept == pytest.approx(-c / d, rel=1e-12)
    # Independent: sign(r)·sd(y)/sd(x) from numpy, and the geometric mean of the two slopes.
    r = np.corrcoef(x, y)[0, 1]
    assert gm.slope == pytest.approx(np.sign(r) * np.std(y) / np.std(x), rel=1e-12)
    b_ols = np.polyfit(x, y, 1)[0]
    assert gm.slope == pytest.approx(-math.sqrt(b_ols / d), rel=1e-12)
    assert gm.intercept == pytest.approx(y.mean() - gm.slope * x.mean(), rel=1e-12)


def test_ols_classical_interval_matches_scipy_linregress() -> None:
    x, y = _both_noisy(5)
    line = _one(x, y, "ols", level=0.9)
    # Independent: scipy.stats.linregress standard errors, scipy.stats.t quantile, n−2 df.
    ref = stats.linregress(x, y)
    t = stats.t.ppf(0.95, x.size - 2)
    assert line.slope == pytest.approx(ref.slope, rel=1e-12)
    assert line.slope_ci_low == pytest.approx(ref.slope - t * ref.stderr, rel=1e-10)
    assert line.slope_ci_high == pytest.approx(ref.slope + t * ref.stderr, rel=1e-10)
    assert line.intercept_ci_low == pytest.approx(ref.intercept - t * ref.intercept_stderr, rel=1e-10)
    assert line.intercept_ci_high == pytest.approx(ref.intercept + t * ref.intercept_stderr, rel=1e-10)
    assert "classical" in line.interval_method


def test_ols_line_reproduces_nist_norris() -> None:
    # Source: NIST StRD Norris, certified B0, B1 and their standard errors.
    case = load_nist("Norris")
    data = np.loadtxt(case.csv_path, delimiter=",", skiprows=1)
    y, x = data[:, 0], data[:, 1]
    line = _one(x, y, "ols", level=0.95)
    t = stats.t.ppf(0.975, case.df_residual)
    (b0, b1), (se0, se1) = case.coefficients, case.std_errors
    assert line.slope == pytest.approx(b1, rel=1e-9)
    assert line.intercept == pytest.approx(b0, rel=1e-9)
    assert (line.slope_ci_high - line.slope_ci_low) / (2 * t) == pytest.approx(se1, rel=1e-8)
    assert (line.intercept_ci_high - line.intercept_ci_low) / (2 * t) == pytest.approx(se0, rel=1e-8)


@pytest.mark.parametrize(("seed", "offset"), [(21, 0.0), (22, 1e5)])
@pytest.mark.parametrize("method", ["reverse", "orthogonal", "deming", "geometric_mean"])
def test_jackknife_matches_a_naive_delete_one_loop(method: str, seed: int, offset: float) -> None:
    x, y = _both_noisy(seed, n=15, offset=offset)
    level, ratio = 0.9, 2.5
    line = _one(x, y, method, error_ratio=ratio, level=level)
    # Independent: refit on each delete-one sample, jackknife SE from numpy,
    # t quantile from scipy.stats with n−1 df, centred on the full-sample estimate.
    n = x.size
    subs = [_one(np.delete(x, i), np.delete(y, i), method, error_ratio=ratio) for i in range(n)]
    t = stats.t.ppf(0.5 + level / 2, n - 1)
    for attr, low, high in (
        ("slope", line.slope_ci_low, line.slope_ci_high),
        ("intercept", line.intercept_ci_low, line.intercept_ci_high),
    ):
        values = np.array([getattr(s, attr) for s in subs])
        se = math.sqrt((n - 1) / n * np.sum((values - values.mean()) ** 2))
        centre = getattr(line, attr)
        assert low == pytest.approx(centre - t * se, rel=1e-7)
        assert high == pytest.approx(centre + t * se, rel=1e-7)
    assert line.interval_method.startswith("jackknife")


def test_deming_runs_from_reverse_to_ols_and_others_lie_between() -> None:
    x, y = _both_noisy(31)
    lines = {ln.method: ln for ln in alternative_lines(x, y, LINE_METHODS, error_ratio=1.7, level=0.95)}
    assert list(lines) == list(LINE_METHODS)
    low, high = sorted((lines["ols"].slope, lines["reverse"].slope))
    for method in ("orthogonal", "deming", "geometric_mean"):
        assert low < lines[method].slope < high
        # Every line passes through the mean point.
        assert lines[method].intercept + lines[method].slope * x.mean() == pytest.approx(y.mean())
    # λ → ∞ (x exact) gives OLS; λ → 0 (y exact) gives the reverse line (numpy closed forms).
    assert _one(x, y, "deming", error_ratio=1e12).slope == pytest.approx(lines["ols"].slope, rel=1e-9)
    assert _one(x, y, "deming", error_ratio=1e-12).slope == pytest.approx(lines["reverse"].slope, rel=1e-9)


def test_every_interval_contains_its_estimate_and_negative_slopes_work() -> None:
    x, y = _both_noisy(41, slope=-0.6)
    for line in alternative_lines(x, y, LINE_METHODS, error_ratio=0.3, level=0.95):
        assert line.slope < 0
        assert line.slope_ci_low < line.slope < line.slope_ci_high
        assert line.intercept_ci_low < line.intercept < line.intercept_ci_high
        assert line.label


def test_degenerate_data_raise_fit_error() -> None:
    with pytest.raises(FitError, match="at least 3"):
        alternative_lines(np.array([1.0, 2.0]), np.array([1.0, 3.0]), ["ols"], error_ratio=1.0, level=0.95)
    with pytest.raises(FitError, match="x values are equal"):
        alternative_lines(np.full(5, 0.1), np.arange(5.0), ["deming"], error_ratio=1.0, level=0.95)
    with pytest.raises(FitError, match="y values are equal"):
        alternative_lines(np.arange(5.0), np.full(5, 0.1), ["reverse"], error_ratio=1.0, level=0.95)
    x0, y0 = np.array([-1.0, 0.0, 1.0]), np.array([1.0, 0.0, 1.0])
    with pytest.raises(FitError, match="no linear association"):
        alternative_lines(x0, y0, ["geometric_mean"], error_ratio=1.0, level=0.95)
    with pytest.raises(FitError, match="finite"):
        alternative_lines(np.array([1.0, np.nan, 3.0]), np.arange(3.0), ["ols"], error_ratio=1.0, level=0.95)


def test_flat_y_is_fine_for_the_ols_line_alone() -> None:
    (line,) = alternative_lines(np.arange(5.0), np.full(5, 2.0), ["ols"], error_ratio=1.0, level=0.95)
    assert (line.slope, line.intercept, line.slope_ci_low, line.slope_ci_high) == (0.0, 2.0, 0.0, 0.0)


def test_jackknife_limits_are_nan_when_one_point_carries_all_the_spread() -> None:
    # Dropping the single x = 1 leaves constant x: no line, so NaN limits (and no warning).
    x, y = np.array([0.0, 0.0, 0.0, 1.0]), np.array([1.0, 2.0, 3.0, 4.0])
    ols, deming = alternative_lines(x, y, ["ols", "deming"], error_ratio=1.0, level=0.95)
    assert math.isfinite(ols.slope_ci_low)
    assert math.isfinite(deming.slope)
    assert math.isnan(deming.slope_ci_low)
    assert math.isnan(deming.intercept_ci_high)
    assert "not available" in deming.interval_method


def test_bad_arguments_raise_value_error() -> None:
    x, y = _both_noisy(3)
    with pytest.raises(ValueError, match="unknown line method"):
        alternative_lines(x, y, ["tls"], error_ratio=1.0, level=0.95)
    with pytest.raises(ValueError, match="repeat"):
        alternative_lines(x, y, ["ols", "ols"], error_ratio=1.0, level=0.95)
    with pytest.raises(ValueError, match="level"):
        alternative_lines(x, y, ["ols"], error_ratio=1.0, level=95.0)
    with pytest.raises(ValueError, match="error_ratio"):
        alternative_lines(x, y, ["deming"], error_ratio=0.0, level=0.95)
    with pytest.raises(ValueError, match="equal length"):
        alternative_lines(x, y[:-1], ["ols"], error_ratio=1.0, level=0.95)
    assert alternative_lines(x, y, [], error_ratio=1.0, level=0.95) == ()


def test_explain_lines_states_the_r_squared_factor() -> None:
    x, y = _both_noisy(9)
    lines = alternative_lines(x, y, LINE_METHODS, error_ratio=1.0, level=0.95)
    r = float(np.corrcoef(x, y)[0, 1])
    text = explain_lines(lines, r)
    # The factor itself: b_ols / b_reverse = Sxy² / (Sxx·Syy) = r² (numpy).
    assert lines[0].slope / lines[1].slope == pytest.approx(r * r, rel=1e-12)
    assert f"{r * r:.3g}" in text
    assert "weaker the correlation" in text
    assert text.count(". ") + 1 <= 2
    assert "same line" in explain_lines(lines, 1.0)
    assert "r²" not in explain_lines(lines[2:], r)
    with pytest.raises(ValueError, match="correlation"):
        explain_lines(lines, 1.5)
