"""Accuracy against NIST StRD linear regression (all eleven sets), and degenerate designs.

Source of every certified value here: NIST/ITL Statistical Reference Datasets (StRD),
Linear Least Squares Regression, https://www.itl.nist.gov/div898/strd/ — the data and
certified values in tests/data/nist/ (provenance in its SOURCE.md), read through
tests/nist_data.py. NIST certifies 15 significant digits.

Accuracy is measured as NIST does, by the log relative error
LRE = −log10(|got − certified| / |certified|) (the number of agreeing significant
digits, capped at 15 here). We ask for LRE ≥ 9 for coefficients and ≥ 7 for standard
errors, residual SD, R² and F. Where NIST certifies zero (the exact fits Wampler1 and
Wampler2: residual SD and standard errors), the absolute error must be at most
1e-9 times a scale stated beside each check.

Each set is checked twice: through the real build (``sitegen build`` on a tmp data
folder holding the NIST CSV and a sidecar with the model, reading ``fit.json`` and
``observations.csv``), and at unit level through ``build_design`` + ``fit_ols``.
Confidence and prediction bands are checked against the closed form
t·s·√h and t·s·√(1 + h) (common practice), with the leverage h from numpy's QR of
the column-scaled design and t from scipy, both independent of sitegen's solver.

The last part feeds degenerate designs through ``analyze()``: exact collinearity,
a design too ill-conditioned to fit, and NIST's exact fit Wampler1.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import warnings
from collections.abc import Callable, Iterable
from decimal import Decimal, localcontext
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import patsy
import pytest
from nist_data import ALL_NIST, NIST_DIR, NistCase, load_nist
from nist_figures import DIAGNOSTICS, KINDS, OBSERVATION_COLUMNS, digits
from nist_reference import reference
from numpy.typing import NDArray
from scipy import stats

from sitegen.analyze import FitTask, analyze
from sitegen.cli import main
from sitegen.discover import discover
from sitegen.formula import build_design
from sitegen.model import FitReport
from sitegen.spec import Limits
from sitegen.stats import ext
from sitegen.stats.ols import OlsFit, anova_table, bands, fit_ols

COEF_DIGITS = 9.0
OTHER_DIGITS = 7.0
ZERO_TOLERANCE = 1e-9  # × the stated scale, where NIST certifies exactly zero
LRE_CAP = 15.0  # NIST certifies 15 significant digits
EXACT_FITS = ("Wampler1", "Wampler2")  # NIST: residual SD and standard errors certified as 0


def lre(got: float | None, certified: float) -> float:
    """NIST's log relative error: the number of significant digits that agree (capped at 15)."""
    if got is None or not math.isfinite(got):
        return 0.0
    if got == certified:
        return LRE_CAP
    rel = abs(got - certified) / abs(certified)
    return min(LRE_CAP, -math.log10(rel))


def assert_digits(what: str, got: float | None, certified: float, digits: float, scale: float) -> None:
    """LRE ≥ digits; for a certified zero, |got| ≤ 1e-9 · scale instead."""
    if certified == 0.0:
        assert got is not None, f"{what}: NIST certifies 0, got nothing"
        assert abs(got) <= ZERO_TOLERANCE * scale, (
            f"{what}: NIST certifies 0, got {got!r} (allowed {ZERO_TOLERANCE * scale:.3g})"
        )
        return
    digits_got = lre(got, certified)
    assert digits_got >= digits, (
        f"{what}: {digits_got:.1f} correct digits (need {digits}); got {got!r}, NIST {certified!r}"
    )


def certified_raw(name: str) -> dict[str, Any]:
    """The whole certified.json entry (for sums of squares the loader does not expose)."""
    entry = json.loads((NIST_DIR / "certified.json").read_text(encoding="utf-8"))[name]
    assert isinstance(entry, dict)
    return entry


def nist_frame(case: NistCase) -> pd.DataFrame:
    frame = pd.read_csv(case.csv_path)
    frame.index = pd.RangeIndex(1, len(frame) + 1)  # 1-based CSV data rows, as build_design expects
    return frame


def rms(values: NDArray[np.float64]) -> float:
    return float(np.sqrt(np.mean(values * values)))


def independent_leverage(case: NistCase) -> NDArray[np.float64]:
    """Hat values from numpy's Householder QR of the column-scaled float64 design."""
    X = np.asarray(patsy.dmatrix(case.formula.split("~", 1)[1], nist_frame(case)), dtype=float)
    q, _ = np.linalg.qr(X / np.linalg.norm(X, axis=0))
    h: NDArray[np.float64] = np.sum(q * q, axis=1)
    return h


# --- the real build -----------------------------------------------------------------------------

Built = tuple[dict[str, Any], pd.DataFrame]


@pytest.fixture(scope="module", params=KINDS)
def nist_build(tmp_path_factory: pytest.TempPathFactory, request: pytest.FixtureRequest) -> Callable[[str], Built]:
    """Build a one-dataset site per NIST set (lazily, once per module and arithmetic); return fit.json and
    observations. The arithmetic is chosen as a user on another platform would have it, by the
    environment variable SITEGEN_EXTENDED (double-double is what platforms without a wide long double get)."""
    done: dict[str, Built] = {}
    kind = str(request.param)

    def get(name: str) -> Built:
        if name not in done:
            case = load_nist(name)
            root = tmp_path_factory.mktemp(f"nist-{name.lower()}-{kind}")
            data = root / "data"
            data.mkdir()
            shutil.copyfile(case.csv_path, data / f"{name}.csv")
            (data / f"{name}.toml").write_text(
                f'title = "NIST StRD {name}"\nmodel = "{case.formula}"\n', encoding="utf-8"
            )
            out = root / "site"
            before = os.environ.get(ext.ENV)
            os.environ[ext.ENV] = kind
            try:
                code = main(["build", str(data), "-o", str(out), "-j", "1", "-q"])
            finally:
                if before is None:
                    del os.environ[ext.ENV]
                else:
                    os.environ[ext.ENV] = before
            assert code in (0, 1), f"build of {name} exited with {code}"
            folder = out / "datasets" / name.lower()
            fit = json.loads((folder / "fit.json").read_text(encoding="utf-8"))
            obs = pd.read_csv(folder / "observations.csv") if (folder / "observations.csv").exists() else None
            done[name] = (fit, obs if obs is not None else pd.DataFrame())
        return done[name]

    return get


def fitted_json(nist_build: Callable[[str], Built], name: str) -> dict[str, Any]:
    fit, _ = nist_build(name)
    errors = [m["text"] for m in fit["messages"] if m["level"] == "error"]
    assert fit["status"] != "error", f"{name} was not fitted: {errors}"
    return fit


@pytest.mark.parametrize("name", ALL_NIST)
def test_build_coefficients_meet_nist_digits(nist_build: Callable[[str], Built], name: str) -> None:
    # Source: NIST StRD certified parameter values B0, B1, … for this set.
    case = load_nist(name)
    fit = fitted_json(nist_build, name)
    coefs = fit["coefficients"]
    assert len(coefs) == len(case.coefficients)
    assert [c["term"] for c in coefs] == fit["terms"]
    for i, (c, cert) in enumerate(zip(coefs, case.coefficients, strict=True)):
        assert_digits(f"{name} B{i} ({c['term']})", c["estimate"], cert, COEF_DIGITS, abs(cert))


@pytest.mark.parametrize("name", ALL_NIST)
def test_build_uncertainty_and_r_squared_meet_nist_digits(nist_build: Callable[[str], Built], name: str) -> None:
    # Source: NIST StRD certified standard deviations of the estimates, residual SD and R².
    # For NoInt1/NoInt2 NIST's R² is uncentered (no intercept), as is ours.
    case = load_nist(name)
    fit = fitted_json(nist_build, name)
    y = pd.read_csv(case.csv_path)["y"].to_numpy(dtype=float)
    for i, (c, cert) in enumerate(zip(fit["coefficients"], case.std_errors, strict=True)):
        # scale for a certified zero SE: the size of the coefficient itself
        scale = abs(case.coefficients[i])
        assert_digits(f"{name} SE(B{i})", c["std_error"], cert, OTHER_DIGITS, scale)
    # scale for a certified zero residual SD: the root mean square of the response
    assert_digits(f"{name} residual SD", fit["residual_std_error"], case.residual_sd, OTHER_DIGITS, rms(y))
    assert_digits(f"{name} R²", fit["r_squared"], case.r_squared, OTHER_DIGITS, 1.0)
    assert fit["df_resid"] == case.df_residual
    assert fit["n"] == len(y)


@pytest.mark.parametrize("name", ALL_NIST)
def test_build_f_statistic_meets_nist_digits(nist_build: Callable[[str], Built], name: str) -> None:
    # Source: NIST StRD certified F statistic (and regression degrees of freedom).
    case = load_nist(name)
    raw = certified_raw(name)
    fit = fitted_json(nist_build, name)
    assert fit["df_model"] == raw["df_regression"]
    if case.f_statistic is None:
        # Wampler1/2: NIST certifies F = Infinity (zero residual). JSON null stands for ±inf;
        # a finite value may only be what rounding leaves of an infinite ratio.
        assert fit["f_stat"] is None or fit["f_stat"] > 1e20
        assert fit["f_p_value"] is not None
        assert fit["f_p_value"] < 1e-100
        return
    assert_digits(f"{name} F", fit["f_stat"], case.f_statistic, OTHER_DIGITS, 1.0)
    # p-value of F on (df_model, df_resid) by scipy, the independent computation
    expected_p = float(stats.f.sf(case.f_statistic, raw["df_regression"], case.df_residual))
    assert fit["f_p_value"] == pytest.approx(expected_p, rel=1e-6, abs=1e-300)


@pytest.mark.parametrize("name", ALL_NIST)
def test_build_bands_follow_the_leverage(nist_build: Callable[[str], Built], name: str) -> None:
    # Closed forms (common practice): half-width of the confidence interval of the mean
    # t·s·√h, of the prediction interval t·s·√(1 + h); t from scipy, s certified by NIST,
    # h from numpy's QR (independent of sitegen's solver).
    case = load_nist(name)
    fitted_json(nist_build, name)
    _, obs = nist_build(name)
    t = float(stats.t.ppf(0.975, case.df_residual))
    h = independent_leverage(case)
    mean_half = (obs["mean_ci_high"] - obs["mean_ci_low"]).to_numpy(dtype=float) / 2
    pred_half = (obs["pred_high"] - obs["pred_low"]).to_numpy(dtype=float) / 2
    assert obs["row"].tolist() == list(range(1, len(h) + 1))
    np.testing.assert_allclose(obs["leverage"].to_numpy(dtype=float), h, rtol=1e-5)
    if name in EXACT_FITS:
        # s = 0 certified: both bands collapse onto the line (scale: RMS of the response)
        scale = rms(obs["y"].to_numpy(dtype=float))
        assert np.all(np.abs(mean_half) <= ZERO_TOLERANCE * scale)
        assert np.all(np.abs(pred_half) <= ZERO_TOLERANCE * scale)
        return
    s = case.residual_sd
    np.testing.assert_allclose(mean_half, t * s * np.sqrt(h), rtol=1e-5, err_msg=f"{name} mean band")
    np.testing.assert_allclose(pred_half, t * s * np.sqrt(1 + h), rtol=1e-5, err_msg=f"{name} prediction band")


#: Checks sitegen judges only on some sets: lack of fit needs enough repeated settings (our rule,
#: stats/checks.py), and Jarque–Bera is computed only where Shapiro–Wilk does not decide normality.
NOT_ALWAYS_JUDGED = frozenset({"lack_of_fit", "normality_jarque_bera"})


@pytest.mark.parametrize("name", ALL_NIST)
def test_build_publishes_every_figure_to_nine_digits(nist_build: Callable[[str], Built], name: str) -> None:
    # Reference: the same figures in 80-digit mpmath arithmetic (tests/nist_reference.py): every
    # column of observations.csv and every diagnostic's statistic and p-value in fit.json, as written.
    ref = reference(name)
    fit = fitted_json(nist_build, name)
    _, obs = nist_build(name)
    short = {}
    for col in OBSERVATION_COLUMNS:
        if col in ref.rows:
            d = digits(obs[col].to_numpy(dtype=float), ref.rows[col])
            if d < COEF_DIGITS:
                short[col] = round(d, 1)
    by_check = {d["check"]: d for d in fit["diagnostics"]}
    # The page shows normality as one check, "normality", carrying Shapiro–Wilk's figures where it decides.
    if "normality" in by_check and "normality_shapiro" not in by_check and len(obs) <= 5000:
        by_check["normality_shapiro"] = by_check["normality"]
    for check, (stat_key, p_key) in DIAGNOSTICS.items():
        for key, field in ((stat_key, "statistic"), (p_key, "p_value")):
            published = by_check.get(check, {}).get(field)
            if published is None and check in NOT_ALWAYS_JUDGED:
                continue  # deliberately not judged on this set (see NOT_ALWAYS_JUDGED)
            if key in ref.scalars:
                d = digits(published, ref.scalars[key])
                if d < COEF_DIGITS:
                    short[key] = round(d, 1)
    if "vif" in ref.rows:
        d = digits(by_check["collinearity"]["statistic"], max(ref.rows["vif"]))
        if d < COEF_DIGITS:
            short["largest VIF"] = round(d, 1)
    d = digits(fit["condition_number"], ref.scalars["condition_number"])
    if d < COEF_DIGITS:
        short["condition number"] = round(d, 1)
    assert not short, f"{name}: fewer than {COEF_DIGITS} correct digits: {short}"


# --- unit level: build_design + fit_ols ---------------------------------------------------------


def unit_fit(case: NistCase) -> tuple[OlsFit, NDArray[np.float64]]:
    design = build_design(case.formula, nist_frame(case), f"{case.name}.csv")
    assert design.has_intercept is case.intercept
    fit = fit_ols(design.X_ext, design.y_ext, design.terms, has_intercept=design.has_intercept, level=0.95)
    return fit, design.X


@pytest.mark.parametrize("name", ALL_NIST)
def test_fit_ols_meets_nist_digits(name: str) -> None:
    # Source: NIST StRD certified values (parameters, their SDs, residual SD, R², F,
    # regression and residual sums of squares).
    case = load_nist(name)
    raw = certified_raw(name)
    fit, _ = unit_fit(case)
    y = pd.read_csv(case.csv_path)["y"].to_numpy(dtype=float)
    assert bool(np.all(np.isfinite(fit.beta)))
    for i, cert in enumerate(case.coefficients):
        assert_digits(f"{name} B{i}", float(fit.beta[i]), cert, COEF_DIGITS, abs(cert))
    for i, cert in enumerate(case.std_errors):
        assert_digits(f"{name} SE(B{i})", float(fit.std_error[i]), cert, OTHER_DIGITS, abs(case.coefficients[i]))
    assert_digits(f"{name} residual SD", fit.sigma, case.residual_sd, OTHER_DIGITS, rms(y))
    assert_digits(f"{name} R²", fit.r_squared, case.r_squared, OTHER_DIGITS, 1.0)
    assert fit.df_resid == case.df_residual
    assert fit.df_model == raw["df_regression"]
    if case.f_statistic is not None:
        assert_digits(f"{name} F", fit.f_stat, case.f_statistic, OTHER_DIGITS, 1.0)
    # The sequential ANOVA rows add up to NIST's regression sum of squares (uncentered
    # without an intercept); the residual row is NIST's residual sum of squares.
    table = anova_table(fit)
    assert table[-1].source == "Residual"
    assert table[-1].df == case.df_residual
    ss_reg = math.fsum(row.sum_sq for row in table[:-1])
    assert_digits(f"{name} regression SS", ss_reg, float(raw["ss_regression"]), OTHER_DIGITS, 1.0)
    # scale for a certified zero residual SS: the total sum of squares of the response
    assert_digits(f"{name} residual SS", table[-1].sum_sq, float(raw["ss_residual"]), OTHER_DIGITS, float(y @ y))


@pytest.mark.parametrize("name", ALL_NIST)
def test_bands_at_the_observed_rows_follow_the_leverage(name: str) -> None:
    # Same closed forms as the build test above, at unit level through ols.bands.
    case = load_nist(name)
    fit, X = unit_fit(case)
    h = independent_leverage(case)
    np.testing.assert_allclose(fit.leverage, h, rtol=1e-5)
    b = bands(fit, X)
    assert bool(np.all(np.isfinite(b.pred_low)))
    assert bool(np.all(np.isfinite(b.pred_high)))
    t = float(stats.t.ppf(0.975, case.df_residual))
    assert fit.t_crit == pytest.approx(t, rel=1e-12)
    if name in EXACT_FITS:
        scale = rms(pd.read_csv(case.csv_path)["y"].to_numpy(dtype=float))
        assert np.all(b.se_mean <= ZERO_TOLERANCE * scale)
        return
    np.testing.assert_allclose(b.se_mean, case.residual_sd * np.sqrt(h), rtol=1e-5, err_msg=f"{name} SE of mean")
    np.testing.assert_allclose(
        (b.pred_high - b.pred_low) / 2, t * case.residual_sd * np.sqrt(1 + h), rtol=1e-5, err_msg=name
    )


# --- robust (HC3) standard errors on NIST's hardest design ----------------------------------------


def dsum(terms: Iterable[Decimal]) -> Decimal:
    return sum(terms, Decimal(0))


def decimal_hc3(case: NistCase, digits: int = 80) -> tuple[list[float], list[float]]:
    """Coefficients and HC3 standard errors from the textbook formulas in 80-digit decimals.

    β = (X'X)⁻¹X'y, hᵢ = xᵢ'(X'X)⁻¹xᵢ, cov = (X'X)⁻¹ X' diag(eᵢ²/(1 − hᵢ)²) X (X'X)⁻¹
    (HC3, MacKinnon & White 1985), on the CSV's decimal strings; Python's decimal module
    is the independent arithmetic. The model is the NIST case's polynomial with intercept.
    """
    with localcontext() as ctx:
        ctx.prec = digits
        lines = case.csv_path.read_text(encoding="ascii").split()[1:]
        ys = [Decimal(line.split(",")[0]) for line in lines]
        xs = [Decimal(line.split(",")[1]) for line in lines]
        p = len(case.coefficients)
        X: list[list[Decimal]] = [[x**k for k in range(p)] for x in xs]
        n = len(X)
        A = [[dsum(X[i][a] * X[i][b] for i in range(n)) for b in range(p)] for a in range(p)]
        aug: list[list[Decimal]] = [A[r][:] + [Decimal(int(r == j)) for j in range(p)] for r in range(p)]
        for col in range(p):  # Gauss-Jordan with partial pivoting
            piv = max(range(col, p), key=lambda r: aug[r][col].copy_abs())
            aug[col], aug[piv] = aug[piv], aug[col]
            lead = aug[col][col]
            aug[col] = [v / lead for v in aug[col]]
            for r in range(p):
                if r != col:
                    f = aug[r][col]
                    aug[r] = [a - f * b for a, b in zip(aug[r], aug[col], strict=True)]
        inv = [row[p:] for row in aug]
        xty = [dsum(X[i][a] * ys[i] for i in range(n)) for a in range(p)]
        beta = [dsum(inv[a][b] * xty[b] for b in range(p)) for a in range(p)]
        e = [ys[i] - dsum(X[i][a] * beta[a] for a in range(p)) for i in range(n)]
        h = [dsum(X[i][a] * dsum(inv[a][b] * X[i][b] for b in range(p)) for a in range(p)) for i in range(n)]
        omega = [e[i] ** 2 / (1 - h[i]) ** 2 for i in range(n)]
        meat = [[dsum(omega[i] * X[i][a] * X[i][b] for i in range(n)) for b in range(p)] for a in range(p)]
        left = [[dsum(inv[a][k] * meat[k][b] for k in range(p)) for b in range(p)] for a in range(p)]
        var = [dsum(left[a][k] * inv[k][a] for k in range(p)) for a in range(p)]
        return [float(b) for b in beta], [float(v.sqrt()) for v in var]


def test_hc3_standard_errors_on_filip_through_analyze(tmp_path: Path) -> None:
    # Reference: the HC3 formula in 80-digit decimal arithmetic (decimal_hc3 above); its
    # coefficients reproduce NIST StRD's certified Filip values, which validates it.
    # statsmodels cannot serve here: its float64 fit of Filip fails (see SOURCE.md).
    case = load_nist("Filip")
    beta, hc3_se = decimal_hc3(case)
    for i, cert in enumerate(case.coefficients):
        assert_digits(f"decimal reference B{i}", beta[i], cert, 12.0, abs(cert))
    report = analyze_one(
        tmp_path / "f",
        "Filip",
        case.csv_path.read_text(encoding="ascii"),
        f'model = "{case.formula}"\nrobust = true\n',
    )
    assert report.status != "error", error_text(report)
    got = [c.robust_std_error for c in report.coefficients]
    assert all(g is not None and g > 0 for g in got), f"robust SEs {got}"
    np.testing.assert_allclose(np.array(got, dtype=float), hc3_se, rtol=1e-4, err_msg="Filip HC3 SE")


# --- degenerate designs through analyze() ----------------------------------------------------------


def analyze_one(folder: Path, name: str, csv_text: str, sidecar: str) -> FitReport:
    """Write NAME.csv + NAME.toml into an empty folder and fit it as a build would."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / f"{name}.csv").write_text(csv_text, encoding="utf-8")
    (folder / f"{name}.toml").write_text(sidecar, encoding="utf-8")
    (source,) = discover(folder)
    return analyze(FitTask(source=source, defaults=(), limits=Limits())).report


def frame_csv(frame: pd.DataFrame) -> str:
    return str(frame.to_csv(index=False, float_format="%.17g"))


def error_text(report: FitReport) -> str:
    return " ".join(m.text for m in report.messages if m.level == "error")


def test_exact_collinearity_is_an_error_naming_the_term(tmp_path: Path) -> None:
    rng = np.random.default_rng(401)
    x1 = rng.uniform(0, 10, 25)
    frame = pd.DataFrame({"y": 1 + x1 + rng.normal(size=25), "x1": x1, "x2": 3 * x1 - 2})
    report = analyze_one(tmp_path / "a", "dup", frame_csv(frame), 'model = "y ~ x1 + x2"\n')
    assert report.status == "error"
    text = error_text(report)
    assert "'x2'" in text
    assert "linear combination" in text
    assert report.coefficients == ()
    assert report.r_squared is None


def test_constant_predictor_beside_an_intercept_is_an_error_naming_it(tmp_path: Path) -> None:
    rng = np.random.default_rng(402)
    x = rng.uniform(0, 10, 20)
    frame = pd.DataFrame({"y": 2 * x + rng.normal(size=20), "x": x, "batch": np.full(20, 7.0)})
    report = analyze_one(tmp_path / "b", "const", frame_csv(frame), 'model = "y ~ x + batch"\n')
    assert report.status == "error"
    assert "'batch'" in error_text(report)


def test_design_too_ill_conditioned_is_refused_with_a_reason(tmp_path: Path) -> None:
    # A degree-7 polynomial on x in [10, 11]: full rank, but its column-scaled condition
    # number is about 3e13, past what float64 data can support.
    x = np.linspace(10.0, 11.0, 30)
    frame = pd.DataFrame({"y": np.sin(x), "x": x})
    model = "y ~ x + " + " + ".join(f"I(x**{k})" for k in range(2, 8))
    report = analyze_one(tmp_path / "c", "wiggle", frame_csv(frame), f'model = "{model}"\n')
    assert report.status == "error"
    text = error_text(report)
    assert "too ill-conditioned" in text
    assert "condition number" in text
    assert report.coefficients == ()
    assert report.r_squared is None
    assert report.residual_std_error is None


def wampler1_report(folder: Path) -> tuple[FitReport, list[warnings.WarningMessage]]:
    case = load_nist("Wampler1")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        report = analyze_one(
            folder, "Wampler1", case.csv_path.read_text(encoding="ascii"), f'model = "{case.formula}"\n'
        )
    return report, caught


def test_exact_fit_wampler1_through_analyze(tmp_path: Path) -> None:
    # Source: NIST StRD Wampler1, y = 1 + x + x² + x³ + x⁴ + x⁵ exactly: certified
    # coefficients all 1, standard errors 0, residual SD 0, R² 1.
    case = load_nist("Wampler1")
    report, caught = wampler1_report(tmp_path / "w")
    assert [str(w.message) for w in caught] == []
    assert report.status != "error", error_text(report)
    assert report.r_squared == pytest.approx(1.0, abs=1e-15)
    y = pd.read_csv(case.csv_path)["y"].to_numpy(dtype=float)
    assert report.residual_std_error is not None
    assert report.residual_std_error <= ZERO_TOLERANCE * rms(y)
    for c, cert in zip(report.coefficients, case.coefficients, strict=True):
        assert math.isfinite(c.estimate)
        assert math.isfinite(c.std_error)
        assert_digits(f"Wampler1 {c.term}", c.estimate, cert, COEF_DIGITS, 1.0)
        assert 0.0 <= c.std_error <= ZERO_TOLERANCE * abs(cert)
    residuals = [a for a in report.anova if a.source == "Residual"]
    assert len(residuals) == 1
    assert residuals[0].sum_sq <= ZERO_TOLERANCE * float(y @ y)


def test_exact_fit_wampler1_flags_no_point_as_off_the_line(tmp_path: Path) -> None:
    # Every Wampler1 point lies on the fitted curve (NIST: residual SD 0), so no point can
    # lie "far from the line" or move it: influence measures built on rounding residue
    # (residuals ~1e-13 of a response ~1e6) must not raise flags or warnings.
    report, _ = wampler1_report(tmp_path / "w")
    assert report.status != "error", error_text(report)
    off_line = [f for f in report.flagged if set(f.reasons) - {"leverage above 2p/n"}]
    assert off_line == [], f"flagged on rounding residue: {off_line}"
    influence_msgs = [m.text for m in report.messages if "far from the line" in m.text or "Cook" in m.text]
    assert influence_msgs == []
