"""Model checks, tested against scipy/statsmodels/numpy computations and published examples.

Data: Anscombe's quartet (F. J. Anscombe, "Graphs in Statistical Analysis", The
American Statistician 27(1), 1973; tests/data/textbook/anscombe_quartet.csv) and
NIST StRD sets in tests/data/nist/ (Pontius is also the load-cell case study of the
NIST/SEMATECH e-Handbook of Statistical Methods, section 4.6.1).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.stats as sps
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.formula.api import ols, wls
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.diagnostic import het_breuschpagan, linear_reset
from statsmodels.stats.outliers_influence import variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson

from sitegen.stats.checks import Check, dw_moments, model_checks, vif
from sitegen.stats.influence import flag_points, influence

DATA = Path(__file__).parent / "data"
NAMES = (
    "constant_variance",
    "independence",
    "normality_shapiro",
    "normality_jarque_bera",
    "curvature",
    "lack_of_fit",
    "collinearity",
    "influence",
)


def anscombe(k: int) -> tuple[np.ndarray, np.ndarray]:
    table = np.loadtxt(DATA / "textbook" / "anscombe_quartet.csv", delimiter=",", skiprows=1)
    return table[:, 2 * k - 2], table[:, 2 * k - 1]


def line_design(x: np.ndarray) -> np.ndarray:
    return np.column_stack([np.ones_like(x), x])


def run(
    X: np.ndarray,
    y: np.ndarray,
    terms: tuple[str, ...] = ("Intercept", "x"),
    *,
    weights: np.ndarray | None = None,
    alpha: float = 0.05,
    resid: np.ndarray | None = None,
) -> dict[str, Check]:
    """Fit by numpy (weighted QR + lstsq) and run every check; residuals on the data's scale."""
    sw = np.ones(len(y)) if weights is None else np.sqrt(weights)
    Xw = X * sw[:, None]
    q = np.linalg.qr(Xw)[0]
    beta = np.linalg.lstsq(Xw, y * sw, rcond=None)[0]
    fitted = X @ beta
    e = y - fitted if resid is None else resid
    infl = influence(q, e, X.shape[0] - X.shape[1], weights=weights)
    checks = model_checks(
        X,
        y,
        e,
        fitted,
        terms=terms,
        has_intercept="Intercept" in terms,
        infl=infl,
        alpha=alpha,
        weights=weights,
    )
    assert tuple(c.check for c in checks) == NAMES
    for c in checks:
        assert c.label
        assert c.text.endswith(".")
        assert (c.advice != "") == c.flag
    return {c.check: c for c in checks}


def assert_not_computed(check: Check, words: str) -> None:
    assert check.statistic is None
    assert check.p_value is None
    assert not check.flag
    assert words in check.text


# --- Anscombe's quartet: same line, different stories ---------------------------------------


def test_anscombe_i_raises_no_curvature_or_influence_flag() -> None:
    x, y = anscombe(1)
    checks = run(line_design(x), y)
    assert not checks["curvature"].flag
    assert not checks["influence"].flag
    assert checks["influence"].rows == ()
    assert not checks["constant_variance"].flag


def test_anscombe_ii_curve_is_caught_by_the_curvature_check() -> None:
    x, y = anscombe(2)
    curvature = run(line_design(x), y)["curvature"]
    assert curvature.flag
    assert curvature.p_value is not None
    assert curvature.p_value < 1e-10
    assert "bends" in curvature.text


def test_anscombe_iii_outlier_is_caught_by_the_influence_check() -> None:
    x, y = anscombe(3)
    check = run(line_design(x), y)["influence"]
    assert check.flag
    assert check.rows == (2,)  # CSV data row 3: x = 13, y = 12.74
    assert "far from the line" in check.text
    assert "|studentized residual| 1,204" in check.text
    assert check.statistic == pytest.approx(1.39, abs=0.005)  # Cook's distance, from memory (see test_influence)


def test_anscombe_iv_single_deciding_point_is_caught_with_the_leverage_explanation() -> None:
    x, y = anscombe(4)
    checks = run(line_design(x), y)
    check = checks["influence"]
    assert check.flag
    assert check.rows == (7,)  # CSV data row 8: x = 19, the only x that is not 8
    assert "leverage 1" in check.text
    assert "alone" in check.text
    # Only two distinct fitted values: squares and cubes add nothing the line lacks.
    assert_not_computed(checks["curvature"], "too few distinct fitted values")
    # Two distinct x settings for two coefficients: no lack-of-fit test.
    assert_not_computed(checks["lack_of_fit"], "as many coefficients as distinct settings (2)")


def test_influence_limits_are_the_median_of_f_and_the_bonferroni_outlier_limit() -> None:
    x, y = anscombe(1)
    text = run(line_design(x), y)["influence"].text
    assert f"Cook's distance 0.489, against the F-median limit {sps.f.ppf(0.5, 2, 9):.3g}" in text  # 0.749
    # Bonferroni outlier test: t(1 − 0.05/22, 8) ≈ 4.1 is above the plain limit 3.
    assert f"|studentized residual| 2.08, against the outlier-test limit {sps.t.isf(0.05 / 22, 8):.3g}" in text


def test_many_ordinary_rows_do_not_raise_the_influence_flag() -> None:
    # With 20 000 normal errors some 50 rows lie beyond |t| = 3 by chance alone; the row marks show
    # them, but the check's verdict uses the Bonferroni limit (about 4.6 here).
    rng = np.random.default_rng(14)
    x = rng.normal(size=20_000)
    y = 1 + x + rng.normal(size=20_000)
    X = line_design(x)
    check = run(X, y)["influence"]
    assert not check.flag
    assert check.rows == ()
    q = np.linalg.qr(X)[0]
    marks = flag_points(influence(q, y - X @ np.linalg.lstsq(X, y, rcond=None)[0], 19_998), 20_000, 2)
    assert sum(marks.large_residual) > 10


# --- Each test against its reference computation --------------------------------------------


def heteroscedastic(seed: int, n: int = 80) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.uniform(1, 10, n)
    return x, 3 + 0.5 * x + rng.normal(size=n) * x


def test_breusch_pagan_matches_statsmodels_and_a_hand_computation() -> None:
    x, y = heteroscedastic(1)
    X = line_design(x)
    check = run(X, y)["constant_variance"]
    e = y - X @ np.linalg.lstsq(X, y, rcond=None)[0]
    lm, p, _, _ = het_breuschpagan(e, X)
    assert check.statistic == pytest.approx(lm, rel=1e-9)
    assert check.p_value == pytest.approx(p, rel=1e-9)
    # Koenker's form by hand: n·R² of e² regressed on (1, x), chi-squared with 1 df.
    u = e**2
    r2 = 1 - np.sum((u - X @ np.linalg.lstsq(X, u, rcond=None)[0]) ** 2) / np.sum((u - u.mean()) ** 2)
    assert check.statistic == pytest.approx(len(u) * r2, rel=1e-9)
    assert check.p_value == pytest.approx(sps.chi2.sf(len(u) * r2, 1), rel=1e-9)
    assert check.flag


def test_breusch_pagan_adds_a_constant_when_the_model_has_none() -> None:
    x, y = heteroscedastic(2)
    X = x[:, None]
    check = run(X, y, ("x",))["constant_variance"]
    e = y - X @ np.linalg.lstsq(X, y, rcond=None)[0]
    lm, p, _, _ = het_breuschpagan(e, sm.add_constant(X))
    assert check.statistic == pytest.approx(lm, rel=1e-9)
    assert check.p_value == pytest.approx(p, rel=1e-9)


def test_durbin_watson_statistic_matches_statsmodels_and_numpy() -> None:
    rng = np.random.default_rng(3)
    n = 60
    x = np.linspace(0, 10, n)
    noise = np.zeros(n)
    for t in range(1, n):
        noise[t] = 0.7 * noise[t - 1] + rng.normal()
    y = 1 + x + noise
    X = line_design(x)
    check = run(X, y)["independence"]
    e = y - X @ np.linalg.lstsq(X, y, rcond=None)[0]
    assert check.statistic == pytest.approx(durbin_watson(e), rel=1e-12)
    assert check.statistic == pytest.approx(np.sum(np.diff(e) ** 2) / np.sum(e**2), rel=1e-12)
    assert check.flag
    assert "correlated" in check.text


@pytest.mark.parametrize("seed", [0, 1])
def test_durbin_watson_moments_equal_dense_matrix_traces(seed: int) -> None:
    # d = e'Ae/e'e with e = Mε: mean tr(MA)/ν, variance 2(ν tr(MAMA) − tr(MA)²)/(ν²(ν+2)).
    rng = np.random.default_rng(seed)
    n = 25
    X = np.column_stack([np.ones(n), rng.normal(size=n), rng.uniform(size=n)])
    q = np.linalg.qr(X)[0]
    M = np.eye(n) - q @ q.T
    D = np.diff(np.eye(n), axis=0)
    MA = M @ (D.T @ D)
    nu = n - 3
    mean, var = dw_moments(q, nu)
    assert mean == pytest.approx(np.trace(MA) / nu, rel=1e-12)
    assert var == pytest.approx(2 * (nu * np.trace(MA @ MA) - np.trace(MA) ** 2) / (nu**2 * (nu + 2)), rel=1e-10)


def test_durbin_watson_p_value_agrees_with_simulation() -> None:
    # Monte Carlo under independent normal errors (seeded): the beta approximation should be close.
    x, y = anscombe(1)
    X = line_design(x)
    check = run(X, y)["independence"]
    q = np.linalg.qr(X)[0]
    E = np.random.default_rng(0).standard_normal((100_000, 11)) @ (np.eye(11) - q @ q.T)
    d = np.sum(np.diff(E, axis=1) ** 2, axis=1) / np.sum(E**2, axis=1)
    simulated = np.mean(d <= check.statistic)  # one-sided: positive autocorrelation (small d)
    assert check.p_value == pytest.approx(simulated, abs=0.01)


@pytest.mark.parametrize("k", [1, 3])
def test_normality_matches_scipy_and_the_jarque_bera_formula(k: int) -> None:
    x, y = anscombe(k)
    X = line_design(x)
    checks = run(X, y)
    e = y - X @ np.linalg.lstsq(X, y, rcond=None)[0]
    w, p = sps.shapiro(e)
    # Our own AS R94 against scipy's, which evaluates parts of it in single precision.
    assert checks["normality_shapiro"].statistic == pytest.approx(w, abs=1e-6)
    assert checks["normality_shapiro"].p_value == pytest.approx(p, abs=1e-5)
    jb, p = sps.jarque_bera(e)
    assert checks["normality_jarque_bera"].statistic == pytest.approx(jb, rel=1e-9)
    assert checks["normality_jarque_bera"].p_value == pytest.approx(p, rel=1e-9)
    # Jarque–Bera by hand: n/6 · (S² + (K − 3)²/4) with moment estimates of skewness and kurtosis.
    z = e - e.mean()
    m2 = np.mean(z**2)
    skew, kurt = np.mean(z**3) / m2**1.5, np.mean(z**4) / m2**2
    assert jb == pytest.approx(len(e) / 6 * (skew**2 + (kurt - 3) ** 2 / 4), rel=1e-9)
    assert checks["normality_shapiro"].flag == (k == 3)  # the outlier of set III skews the residuals


def test_shapiro_is_skipped_above_5000_rows_but_jarque_bera_is_not() -> None:
    rng = np.random.default_rng(4)
    x = rng.normal(size=6000)
    checks = run(line_design(x), 1 + x + rng.normal(size=6000))
    assert_not_computed(checks["normality_shapiro"], "3 to 5,000 rows only, not 6,000")
    assert checks["normality_jarque_bera"].statistic is not None


def test_reset_matches_statsmodels_and_a_hand_computation() -> None:
    rng = np.random.default_rng(6)
    n = 50
    x = rng.uniform(0, 4, n)
    y = 1 + x + 0.3 * x**2 + rng.normal(scale=0.5, size=n)
    X = line_design(x)
    check = run(X, y)["curvature"]
    ref = linear_reset(sm.OLS(y, X).fit(), power=3, use_f=True)
    assert check.statistic == pytest.approx(float(ref.fvalue), rel=1e-8)
    assert check.p_value == pytest.approx(float(ref.pvalue), rel=1e-7)
    # By hand: F for adding ŷ² and ŷ³, (ΔSSR / 2) / (SSR_aug / (n − 4)).
    fitted = X @ np.linalg.lstsq(X, y, rcond=None)[0]
    aug = np.column_stack([X, fitted**2, fitted**3])
    ssr0 = np.sum((y - fitted) ** 2)
    ssr1 = np.sum((y - aug @ np.linalg.lstsq(aug, y, rcond=None)[0]) ** 2)
    assert check.statistic == pytest.approx((ssr0 - ssr1) / 2 / (ssr1 / (n - 4)), rel=1e-8)
    assert check.flag


def test_reset_respects_weights() -> None:
    x, y = heteroscedastic(7, 60)
    y = y + 0.2 * x**2
    w = 1 / x**2
    X = line_design(x)
    check = run(X, y, weights=w)["curvature"]
    small = sm.WLS(y, X, weights=w).fit()
    big = sm.WLS(y, np.column_stack([X, small.fittedvalues**2, small.fittedvalues**3]), weights=w).fit()
    f, p, _ = big.compare_f_test(small)
    assert check.statistic == pytest.approx(f, rel=1e-7)
    assert check.p_value == pytest.approx(p, rel=1e-6)


def pontius() -> pd.DataFrame:
    return pd.read_csv(DATA / "nist" / "Pontius.csv")


def test_lack_of_fit_matches_the_nist_handbook_load_cell_example() -> None:
    # NIST/SEMATECH e-Handbook of Statistical Methods, 4.6.1.5 (load cell calibration, straight
    # line): lack-of-fit F statistic = 214.7464 on 18 and 20 degrees of freedom.
    data = pontius()
    x, y = data["x"].to_numpy(float), data["y"].to_numpy(float)
    check = run(line_design(x), y)["lack_of_fit"]
    assert check.statistic == pytest.approx(214.7464, rel=1e-5)
    assert check.p_value == pytest.approx(sps.f.sf(check.statistic, 18, 20), rel=1e-9)
    assert check.flag
    assert "20 distinct settings" in check.text


@pytest.mark.parametrize(
    ("formula", "terms"),
    [("y ~ x", ("Intercept", "x")), ("y ~ x + I(x**2)", ("Intercept", "x", "I(x ** 2)"))],
)
def test_lack_of_fit_matches_statsmodels_anova_against_cell_means(formula: str, terms: tuple[str, ...]) -> None:
    data = pontius()
    x, y = data["x"].to_numpy(float), data["y"].to_numpy(float)
    X = np.column_stack([x**k for k in range(len(terms))])
    check = run(X, y, terms)["lack_of_fit"]
    table = anova_lm(ols(formula, data).fit(), ols("y ~ C(x)", data).fit())
    assert check.statistic == pytest.approx(table["F"].iloc[1], rel=1e-6)
    assert check.p_value == pytest.approx(table["Pr(>F)"].iloc[1], rel=1e-5)
    assert check.flag == (len(terms) == 2)  # the quadratic fits the load cell (NIST's conclusion too)


def test_lack_of_fit_with_weights_matches_weighted_anova() -> None:
    rng = np.random.default_rng(8)
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0], 4)
    w = rng.uniform(0.5, 2.0, x.size)
    y = 1 + x + 0.2 * x**2 + rng.normal(size=x.size) / np.sqrt(w)
    data = pd.DataFrame({"x": x, "y": y})
    check = run(line_design(x), y, weights=w)["lack_of_fit"]
    table = anova_lm(wls("y ~ x", data, weights=w).fit(), wls("y ~ C(x)", data, weights=w).fit())
    assert check.statistic == pytest.approx(table["F"].iloc[1], rel=1e-8)


def test_lack_of_fit_by_hand() -> None:
    # x = 1, 1, 2, 2, 3, 3; y = 1, 3, 5, 7, 6, 8. Setting means 2, 6, 7, pure error SS = 2 + 2 + 2 = 6 on
    # 3 df. With equal repeats the line is the line through the means: slope 2.5, intercept 0, fitted
    # 2.5, 5, 7.5, so lack-of-fit SS = 2·(0.25 + 1 + 0.25) = 3 on 3 − 2 = 1 df. F = (3/1)/(6/3) = 1.5.
    x = np.array([1.0, 1.0, 2.0, 2.0, 3.0, 3.0])
    y = np.array([1.0, 3.0, 5.0, 7.0, 6.0, 8.0])
    check = run(line_design(x), y)["lack_of_fit"]
    assert check.statistic == pytest.approx(1.5, rel=1e-12)
    assert check.p_value == pytest.approx(sps.f.sf(1.5, 1, 3), rel=1e-12)
    assert not check.flag


def longley() -> tuple[np.ndarray, np.ndarray]:
    data = pd.read_csv(DATA / "nist" / "Longley.csv")
    return data[[f"x{i}" for i in range(1, 7)]].to_numpy(float), data["y"].to_numpy(float)


def test_collinearity_on_longley_matches_statsmodels_and_known_vifs() -> None:
    predictors, y = longley()
    X = sm.add_constant(predictors)
    terms = ("Intercept", "x1", "x2", "x3", "x4", "x5", "x6")
    factors = vif(X, 0)
    np.testing.assert_allclose(factors, [variance_inflation_factor(X, j) for j in range(1, 7)], rtol=1e-8)
    # Longley's VIFs as widely quoted (from memory): 135.53, 1788.51, 33.62, 3.59, 399.15, 758.98.
    np.testing.assert_allclose(factors, [135.53, 1788.51, 33.62, 3.59, 399.15, 758.98], rtol=1e-3)
    check = run(X, y, terms)["collinearity"]
    assert check.flag
    assert check.statistic == pytest.approx(factors.max())
    assert "x2 1,789" in check.text
    assert "x4" not in check.text  # VIF 3.59 is under 10
    scaled = X / np.linalg.norm(X, axis=0)
    assert f"condition number {np.linalg.cond(scaled):,.0f}" in check.text


def test_collinearity_without_intercept_uses_the_scaled_condition_number() -> None:
    rng = np.random.default_rng(9)
    a = rng.uniform(1, 2, 30)
    X = np.column_stack([a, a + rng.normal(scale=0.001, size=30)])
    check = run(X, X @ [1.0, 1.0] + rng.normal(size=30), ("a", "b"))["collinearity"]
    assert check.statistic == pytest.approx(np.linalg.cond(X / np.linalg.norm(X, axis=0)), rel=1e-8)
    assert check.flag
    assert check.p_value is None


def test_collinearity_is_quiet_for_unrelated_predictors() -> None:
    rng = np.random.default_rng(10)
    X = np.column_stack([np.ones(40), rng.normal(size=40), rng.normal(size=40)])
    check = run(X, X @ [1.0, 2.0, 3.0] + rng.normal(size=40), ("Intercept", "a", "b"))["collinearity"]
    assert not check.flag
    assert check.statistic is not None
    assert check.statistic < 2


def test_equal_weights_change_nothing() -> None:
    x, y = heteroscedastic(12, 30)
    X = line_design(x)
    plain = run(X, y)
    weighted = run(X, y, weights=np.full(30, 4.0))
    for name in NAMES:
        a, b = plain[name].statistic, weighted[name].statistic
        assert (a is None) == (b is None)
        if a is not None and b is not None:
            assert a == pytest.approx(b, rel=1e-8)


# --- What cannot be computed says why --------------------------------------------------------


def test_two_rows_for_a_line_leave_nothing_to_judge() -> None:
    checks = run(line_design(np.array([1.0, 2.0])), np.array([3.0, 5.0]))
    for name in NAMES[:6]:
        assert_not_computed(checks[name], "nothing is left over")
    assert_not_computed(checks["influence"], "fitted exactly")


def test_exact_polynomial_fit_is_reported_not_tested() -> None:
    # NIST StRD Wampler1 is y = 1 + x + x² + x³ + x⁴ + x⁵ exactly; the residuals are exactly zero.
    data = pd.read_csv(DATA / "nist" / "Wampler1.csv")
    x, y = data["x"].to_numpy(float), data["y"].to_numpy(float)
    X = np.column_stack([x**k for k in range(6)])
    terms = ("Intercept", "x", "I(x ** 2)", "I(x ** 3)", "I(x ** 4)", "I(x ** 5)")
    checks = run(X, y, terms, resid=np.zeros_like(y))
    for name in NAMES[:6]:
        assert_not_computed(checks[name], "passes through every point")
    assert not checks["influence"].flag


def test_intercept_only_model() -> None:
    rng = np.random.default_rng(13)
    y = rng.normal(size=20)
    checks = run(np.ones((20, 1)), y, ("Intercept",))
    assert_not_computed(checks["constant_variance"], "no predictor")
    assert_not_computed(checks["curvature"], "fitted values are all equal")
    assert_not_computed(checks["lack_of_fit"], "no predictors")
    assert_not_computed(checks["collinearity"], "fewer than two predictors")
    assert checks["normality_shapiro"].statistic is not None


def test_mismatched_shapes_are_programming_errors() -> None:
    x, y = anscombe(1)
    X = line_design(x)
    infl = influence(np.linalg.qr(X)[0], y - y.mean(), 9)
    with pytest.raises(ValueError, match="shapes"):
        model_checks(X, y[:10], y, y, terms=("Intercept", "x"), has_intercept=True, infl=infl, alpha=0.05)
    with pytest.raises(ValueError, match="shapes"):
        model_checks(X, y, y, y, terms=("x",), has_intercept=True, infl=infl, alpha=0.05)


@settings(max_examples=60, deadline=None)
@given(
    xs=st.lists(st.integers(0, 3), min_size=3, max_size=14),
    ys=st.lists(st.integers(-2, 2), min_size=14, max_size=14),
    intercept=st.booleans(),
)
def test_never_raises_or_warns_on_small_awkward_data(xs: list[int], ys: list[int], intercept: bool) -> None:
    x = np.array(xs, dtype=float)
    X, terms = (line_design(x), ("Intercept", "x")) if intercept else (x[:, None], ("x",))
    if np.linalg.matrix_rank(X) < X.shape[1]:
        return  # the solver refuses singular designs before the checks run
    checks = run(X, np.array(ys[: len(xs)], dtype=float), terms)  # warnings are errors here
    for c in checks.values():
        assert c.statistic is None or not math.isnan(c.statistic)
