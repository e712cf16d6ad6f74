"""Influence measures from closed forms, checked against statsmodels, hand formulas and published values.

statsmodels' ``OLSInfluence`` is the independent reference (it refits with each
row left out for the studentized residuals); the data are Anscombe's quartet
(F. J. Anscombe, "Graphs in Statistical Analysis", The American Statistician
27(1), 1973; see tests/data/textbook/anscombe_quartet.source.txt) and seeded
random designs.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.outliers_influence import OLSInfluence

from sitegen.stats.influence import LEVERAGE_ONE, Influence, flag_points, influence

ANSCOMBE = Path(__file__).parent / "data" / "textbook" / "anscombe_quartet.csv"


def anscombe(k: int) -> tuple[np.ndarray, np.ndarray]:
    table = np.loadtxt(ANSCOMBE, delimiter=",", skiprows=1)
    return table[:, 2 * k - 2], table[:, 2 * k - 1]


def line_design(x: np.ndarray) -> np.ndarray:
    return np.column_stack([np.ones_like(x), x])


def fit(X: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Thin Q, residuals and residual df, the way the tests build the module's inputs."""
    q = np.linalg.qr(X)[0]
    beta = np.linalg.lstsq(X, y, rcond=None)[0]
    return q, y - X @ beta, X.shape[0] - X.shape[1]


def ours(X: np.ndarray, y: np.ndarray) -> Influence:
    return influence(*fit(X, y))


def assert_matches_statsmodels(X: np.ndarray, y: np.ndarray) -> None:
    got = ours(X, y)
    ref = OLSInfluence(sm.OLS(y, X).fit())
    np.testing.assert_allclose(got.leverage, ref.hat_matrix_diag, rtol=1e-10)
    np.testing.assert_allclose(got.studentized_residual, ref.resid_studentized_external, rtol=1e-9)
    np.testing.assert_allclose(got.standardized_residual, ref.resid_studentized_internal, rtol=1e-9)
    np.testing.assert_allclose(got.cooks_distance, ref.cooks_distance[0], rtol=1e-9)
    np.testing.assert_allclose(got.dffits, ref.dffits[0], rtol=1e-9)


@pytest.mark.parametrize("k", [1, 2, 3, 4])
def test_anscombe_file_has_the_papers_summary_values(k: int) -> None:
    # Anscombe (1973): every set has mean x 9, mean y 7.50, fitted line y = 3.00 + 0.500 x;
    # variance of x 11 and correlation 0.816 (those two from memory of the paper's list).
    x, y = anscombe(k)
    assert len(x) == 11
    assert x.mean() == 9.0
    assert round(float(y.mean()), 2) == 7.50
    slope, intercept = np.polyfit(x, y, 1)
    assert round(float(slope), 3) == 0.500
    assert round(float(intercept), 2) == 3.00
    assert x.var(ddof=1) == pytest.approx(11.0)
    assert float(np.corrcoef(x, y)[0, 1]) == pytest.approx(0.816, abs=1e-3)


@pytest.mark.parametrize("k", [1, 2, 3])
def test_anscombe_matches_statsmodels(k: int) -> None:
    x, y = anscombe(k)
    assert_matches_statsmodels(line_design(x), y)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_random_designs_match_statsmodels(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 60
    X = np.column_stack([np.ones(n), rng.normal(size=n), rng.uniform(0, 10, n), rng.normal(size=n) ** 2])
    y = X @ np.array([1.0, 2.0, -0.5, 0.3]) + rng.standard_t(3, size=n)
    y[7] += 15.0  # one gross outlier
    assert_matches_statsmodels(X, y)


def test_anscombe_iii_outlier_matches_hand_formula_and_published_values() -> None:
    x, y = anscombe(3)
    got = ours(line_design(x), y)
    # Straight-line leverage by hand: h = 1/n + (x − x̄)² / Sxx with x̄ = 9, Sxx = 110 (textbook closed form).
    np.testing.assert_allclose(got.leverage, 1 / 11 + (x - 9.0) ** 2 / 110.0, rtol=1e-12)
    # Row 3 (x = 13, y = 12.74) is the outlier: Cook's distance 1.39 and externally studentized
    # residual about 1203.5, as widely reproduced for this data set (both from memory).
    assert round(got.cooks_distance[2], 2) == 1.39
    assert round(got.studentized_residual[2], 1) == 1203.5
    others = [abs(t) for i, t in enumerate(got.studentized_residual) if i != 2]
    assert max(others) < 1.5


def test_anscombe_iv_point_with_leverage_one_is_nan_not_a_warning() -> None:
    x, y = anscombe(4)
    got = ours(line_design(x), y)
    # By hand: x̄ = 9, Sxx = 10·1 + 100 = 110, so h = 1/11 + 1/110 = 0.1 at x = 8
    # and 1/11 + 100/110 = 1 at x = 19.
    assert got.leverage[7] == pytest.approx(1.0, abs=1e-12)
    assert got.leverage[7] > LEVERAGE_ONE
    np.testing.assert_allclose(np.delete(got.leverage, 7), 0.1, rtol=1e-12)
    for measure in (got.studentized_residual, got.standardized_residual, got.cooks_distance, got.dffits):
        assert math.isnan(measure[7])
        assert all(math.isfinite(v) for i, v in enumerate(measure) if i != 7)
    # The other ten rows by hand (numpy): fitted value at x = 8 is the mean of their y.
    rest = np.delete(y, 7)
    e = rest - rest.mean()
    s = math.sqrt(float(e @ e) / 9)
    np.testing.assert_allclose(np.delete(got.standardized_residual, 7), e / (s * math.sqrt(0.9)), rtol=1e-10)
    np.testing.assert_allclose(
        np.delete(got.cooks_distance, 7), (e / (s * math.sqrt(0.9))) ** 2 * 0.1 / (2 * 0.9), rtol=1e-10
    )


def test_one_residual_degree_of_freedom_leaves_external_measures_undefined() -> None:
    X = line_design(np.array([1.0, 2.0, 4.0]))
    got = ours(X, np.array([1.0, 3.0, 2.0]))
    assert all(math.isnan(v) for v in got.studentized_residual + got.dffits)
    assert all(math.isfinite(v) for v in got.standardized_residual + got.cooks_distance)


def test_no_residual_degrees_of_freedom_leaves_only_leverage() -> None:
    X = line_design(np.array([1.0, 2.0]))
    got = ours(X, np.array([5.0, 3.0]))
    np.testing.assert_allclose(got.leverage, [1.0, 1.0])
    for measure in (got.studentized_residual, got.standardized_residual, got.cooks_distance, got.dffits):
        assert all(math.isnan(v) for v in measure)


def test_perfect_fit_gives_nan_measures() -> None:
    x = np.arange(6.0)
    q, _, df = fit(line_design(x), 2 + 3 * x)
    got = influence(q, np.zeros(6), df)
    undefined = got.standardized_residual + got.studentized_residual + got.cooks_distance
    assert all(math.isnan(v) for v in undefined)
    assert all(0 < h < 1 for h in got.leverage)


def test_point_off_an_exact_line_has_infinite_studentized_residual() -> None:
    # Without row 4 the data lie exactly on y = x, so its leave-one-out scatter is zero.
    x = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    got = ours(line_design(x), np.array([0.0, 1.0, 2.0, 3.0, 9.0]))
    assert got.studentized_residual[4] == math.inf
    assert got.dffits[4] == math.inf
    assert all(math.isfinite(v) for v in got.studentized_residual[:4])


def test_weights_equal_an_ols_fit_of_the_weighted_rows() -> None:
    rng = np.random.default_rng(5)
    n = 40
    x = rng.uniform(1, 10, n)
    w = 1 / x**2
    y = 2 + 0.7 * x + rng.normal(size=n) * x
    X = line_design(x)
    sw = np.sqrt(w)
    q, resid_w, df = fit(X * sw[:, None], y * sw)
    got = influence(q, resid_w / sw, df, weights=w)  # residuals on the response's scale
    ref = OLSInfluence(sm.OLS(y * sw, X * sw[:, None]).fit())
    np.testing.assert_allclose(got.studentized_residual, ref.resid_studentized_external, rtol=1e-9)
    np.testing.assert_allclose(got.cooks_distance, ref.cooks_distance[0], rtol=1e-9)


def test_large_design_matches_the_straight_line_hand_formula() -> None:
    rng = np.random.default_rng(11)
    n = 200_000
    x = rng.normal(size=n)
    y = 1 + 2 * x + rng.normal(size=n)
    got = ours(line_design(x), y)
    sxx = float(np.sum((x - x.mean()) ** 2))
    np.testing.assert_allclose(got.leverage, 1 / n + (x - x.mean()) ** 2 / sxx, rtol=1e-8)
    assert len(got.dffits) == n


def test_flag_points_anscombe_iii_and_iv() -> None:
    x, y = anscombe(3)
    flags = flag_points(ours(line_design(x), y), 11, 2)
    assert flags.leverage_cutoff == pytest.approx(4 / 11)
    assert flags.cooks_cutoff == pytest.approx(4 / 11)
    assert flags.dffits_cutoff == pytest.approx(2 * math.sqrt(2 / 11))
    assert flags.residual_cutoff == 3.0
    assert flags.rows == (2,)
    assert flags.large_residual[2]
    assert flags.large_cooks[2]
    assert sum(flags.large_residual) == 1
    assert not any(flags.leverage_one)

    x, y = anscombe(4)
    flags = flag_points(ours(line_design(x), y), 11, 2)
    assert flags.rows == (7,)
    assert flags.leverage_one.tolist() == [i == 7 for i in range(11)]
    assert flags.high_leverage[7]
    assert not flags.large_cooks[7]  # undefined (NaN) never crosses a cut-off


def test_bad_arguments_are_programming_errors() -> None:
    with pytest.raises(ValueError, match="shape"):
        influence(np.zeros((4, 2)), np.zeros(5), 2)
    x, y = anscombe(1)
    with pytest.raises(ValueError, match="do not match"):
        flag_points(ours(line_design(x), y), 12, 2)


@settings(max_examples=60, deadline=None)
@given(
    xs=st.lists(st.integers(-3, 3), min_size=1, max_size=12),
    ys=st.lists(st.integers(-3, 3), min_size=12, max_size=12),
    quadratic=st.booleans(),
)
def test_never_warns_on_small_awkward_data(xs: list[int], ys: list[int], quadratic: bool) -> None:
    x = np.array(xs, dtype=float)
    X = np.column_stack([np.ones_like(x), x, x**2]) if quadratic else line_design(x)
    y = np.array(ys[: len(xs)], dtype=float)
    q, resid, df = fit(X, y)
    got = influence(q, resid, df)  # warnings are errors in this test suite
    assert len(got.leverage) == len(got.dffits) == len(xs)
    flag_points(got, len(xs), X.shape[1])
