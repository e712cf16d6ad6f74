"""sitegen's OLS/WLS inference against statsmodels on well-conditioned, seeded data.

Reference: statsmodels (``smf.ols``, ``sm.WLS``, ``anova_lm(typ=1)``,
``get_prediction().summary_frame``, ``fit(cov_type="HC3")``), an independent
implementation of the same textbook formulas; numpy gives the weighted R² by its
definition 1 − Σw·e² / Σw·(y − ȳ_w)² (common practice, and statsmodels' WLS R²).
The data are invented and seeded: several shapes (one line, two predictors with a
square, no intercept, a log response, weighted lines), several confidence levels.

Each shape is checked at unit level (``build_design`` + ``fit_ols``) and, for a
subset, end to end through the real build (``fit.json``, ``coefficients.csv``,
``observations.csv``).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import patsy
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from numpy.typing import NDArray
from scipy import stats
from statsmodels.stats.anova import anova_lm

from sitegen.analyze import FitTask, analyze
from sitegen.cli import main
from sitegen.discover import discover
from sitegen.formula import Design, build_design, design_for
from sitegen.model import FitReport
from sitegen.spec import Limits
from sitegen.stats.ols import OlsFit, anova_table, bands, fit_ols, row_bands
from sitegen.stats.robust import hc3_cov

COEFFICIENT_COLUMNS = ("term", "estimate", "std_error", "t_stat", "p_value", "ci_low", "ci_high")  # DESIGN.md
RTOL = 1e-9  # well-conditioned data: both implementations should agree to ~12 digits


@dataclass(frozen=True)
class Case:
    """One invented dataset and how it is modelled."""

    name: str
    formula: str
    frame: pd.DataFrame  # index: 1-based CSV rows
    level: float
    weights: str | None
    new: pd.DataFrame  # predictor values at which to predict


def _indexed(data: dict[str, NDArray[np.float64]]) -> pd.DataFrame:
    frame = pd.DataFrame(data)
    frame.index = pd.RangeIndex(1, len(frame) + 1)
    return frame


def make_cases() -> list[Case]:
    rng = np.random.default_rng(20240917)
    cases = []
    x = rng.uniform(0, 10, 30)
    cases.append(
        Case(
            "line",
            "y ~ x",
            _indexed({"x": x, "y": 2.0 + 0.7 * x + rng.normal(0, 1.0, 30)}),
            0.95,
            None,
            pd.DataFrame({"x": np.linspace(-2, 12, 7)}),
        )
    )
    x1, x2 = rng.uniform(0, 5, 60), rng.normal(10, 3, 60)
    y = 1.0 - 0.8 * x1 + 0.3 * x2 + 0.25 * x1**2 + rng.normal(0, 0.5, 60)
    new = pd.DataFrame({"x1": [0.5, 2.0, 4.5, 6.0, 1.0, 3.0, 2.5], "x2": [4.0, 10.0, 16.0, 9.0, 12.0, 7.0, 10.5]})
    frame = _indexed({"x1": x1, "x2": x2, "y": y})
    cases.append(Case("two_predictors_square", "y ~ x1 + x2 + I(x1**2)", frame, 0.90, None, new))
    x = rng.uniform(1, 20, 25)
    cases.append(
        Case(
            "no_intercept",
            "y ~ x - 1",
            _indexed({"x": x, "y": 1.5 * x + rng.normal(0, 2.0, 25)}),
            0.99,
            None,
            pd.DataFrame({"x": [0.0, 5.0, 10.0, 25.0, 2.0, 7.0, 30.0]}),
        )
    )
    x = rng.uniform(0, 4, 40)
    y = np.exp(0.2 + 0.45 * x + rng.normal(0, 0.15, 40))
    cases.append(
        Case(
            "log_response",
            "np.log(y) ~ x",
            _indexed({"x": x, "y": y}),
            0.95,
            None,
            pd.DataFrame({"x": np.linspace(0, 5, 7)}),
        )
    )
    x = rng.uniform(1, 10, 40)
    w = 1.0 / x**2  # error SD proportional to x
    y = 3.0 + 1.2 * x + rng.normal(0, 1.0, 40) * x * 0.3
    cases.append(
        Case(
            "weighted_line",
            "y ~ x",
            _indexed({"x": x, "y": y, "w": w}),
            0.95,
            "w",
            pd.DataFrame({"x": np.linspace(1, 10, 7)}),
        )
    )
    x1, x2 = rng.uniform(0, 3, 50), rng.uniform(-1, 1, 50)
    w = rng.uniform(0.2, 5.0, 50)
    y = 0.5 + 2.0 * x1 - 1.0 * x2 + rng.normal(0, 1.0, 50) / np.sqrt(w)
    new = pd.DataFrame({"x1": [0.0, 1.0, 2.0, 3.0, 0.5, 1.5, 2.5], "x2": [-1.0, 0.0, 1.0, 0.5, -0.5, 0.2, -0.2]})
    frame = _indexed({"x1": x1, "x2": x2, "y": y, "w": w})
    cases.append(Case("weighted_two_predictors", "y ~ x1 + x2", frame, 0.90, "w", new))
    return cases


CASES = make_cases()
BY_NAME = {c.name: c for c in CASES}
IDS = [c.name for c in CASES]


def ours(case: Case) -> tuple[Design, OlsFit, NDArray[np.float64] | None]:
    extra = (case.weights,) if case.weights else ()
    design = build_design(case.formula, case.frame, f"{case.name}.csv", extra)
    w = case.frame[case.weights].to_numpy(dtype=float) if case.weights else None
    fit = fit_ols(
        design.X_ext,
        design.y_ext,
        design.terms,
        has_intercept=design.has_intercept,
        level=case.level,
        weights=w,
    )
    return design, fit, w


def reference(case: Case, cov_type: str = "nonrobust") -> Any:
    """statsmodels fit: smf.ols from the formula, or sm.WLS on patsy's design for weighted cases."""
    kwargs: dict[str, Any] = {} if cov_type == "nonrobust" else {"cov_type": cov_type, "use_t": True}
    if case.weights is None:
        return smf.ols(case.formula, data=case.frame).fit(**kwargs)
    y, X = patsy.dmatrices(case.formula, case.frame, return_type="dataframe")
    return sm.WLS(y, X, weights=case.frame[case.weights]).fit(**kwargs)


def close(got: Any, want: Any, rtol: float = RTOL, what: str = "") -> None:
    np.testing.assert_allclose(
        np.asarray(got, dtype=float), np.asarray(want, dtype=float), rtol=rtol, atol=0, err_msg=what
    )


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_coefficient_table_matches_statsmodels(case: Case) -> None:
    # Reference: statsmodels params, bse, tvalues, pvalues, conf_int(alpha).
    design, fit, _ = ours(case)
    ref = reference(case)
    assert design.terms == tuple(ref.params.index)
    close(fit.beta, ref.params, what="estimates")
    close(fit.std_error, ref.bse, what="standard errors")
    close(fit.t_stat, ref.tvalues, what="t")
    close(fit.p_value, ref.pvalues, rtol=1e-7, what="p")
    ci = ref.conf_int(alpha=1 - case.level).to_numpy()
    close(fit.ci_low, ci[:, 0], what="CI low")
    close(fit.ci_high, ci[:, 1], what="CI high")


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_fit_summary_matches_statsmodels(case: Case) -> None:
    # Reference: statsmodels rsquared (centred; uncentred without a constant), rsquared_adj,
    # fvalue, f_pvalue, residual SD √scale, ssr, degrees of freedom.
    _, fit, _ = ours(case)
    ref = reference(case)
    assert fit.n == int(ref.nobs)
    assert fit.df_resid == int(ref.df_resid)
    assert fit.df_model == int(ref.df_model)
    close(fit.r_squared, ref.rsquared, what="R²")
    close(fit.adj_r_squared, ref.rsquared_adj, what="adjusted R²")
    close(fit.f_stat, ref.fvalue, what="F")
    close(fit.f_p_value, ref.f_pvalue, rtol=1e-7, what="F p-value")
    close(fit.sigma, np.sqrt(ref.scale), what="residual SD")
    close(fit.ssr, ref.ssr, what="residual SS")


@pytest.mark.parametrize("case", [c for c in CASES if c.weights], ids=lambda c: c.name)
def test_weighted_r_squared_is_the_weighted_definition(case: Case) -> None:
    # Definition (common practice, and statsmodels' WLS): R² = 1 − Σw·e² / Σw·(y − ȳ_w)²,
    # ȳ_w the weighted mean; computed here with plain numpy.
    design, fit, w = ours(case)
    assert w is not None
    y = design.y
    e = y - design.X @ np.linalg.lstsq(design.X * np.sqrt(w)[:, None], y * np.sqrt(w), rcond=None)[0]
    ybar = np.sum(w * y) / np.sum(w)
    r2 = 1 - np.sum(w * e**2) / np.sum(w * (y - ybar) ** 2)
    close(fit.r_squared, r2, what="weighted R²")
    close(fit.resid, e, rtol=1e-8, what="unweighted residuals y − fitted")
    unweighted = smf.ols(case.formula, data=case.frame).fit()
    assert abs(fit.r_squared - unweighted.rsquared) > 1e-6  # the weights really matter here


@pytest.mark.parametrize("case", [c for c in CASES if not c.weights], ids=lambda c: c.name)
def test_anova_table_matches_anova_lm_type_1(case: Case) -> None:
    # Reference: statsmodels.stats.anova.anova_lm(typ=1), sequential sums of squares.
    _, fit, _ = ours(case)
    ref = anova_lm(reference(case), typ=1)
    table = anova_table(fit)
    assert [r.source for r in table] == list(ref.index)
    assert [r.df for r in table] == [int(v) for v in ref["df"]]
    close([r.sum_sq for r in table], ref["sum_sq"], what="sum_sq")
    close([r.mean_sq for r in table], ref["mean_sq"], what="mean_sq")
    close([r.f_stat for r in table[:-1]], ref["F"].iloc[:-1], what="F")
    close([r.p_value for r in table[:-1]], ref["PR(>F)"].iloc[:-1], rtol=1e-7, what="p")
    assert table[-1].f_stat is None
    assert table[-1].p_value is None


@pytest.mark.parametrize("case", [c for c in CASES if c.weights], ids=lambda c: c.name)
def test_weighted_anova_table_matches_nested_wls_models(case: Case) -> None:
    # Reference: anova_lm comparing the nested WLS fits y ~ 1, y ~ t1, y ~ t1 + t2, …
    # (each row's SS is the drop in weighted residual SS; common practice). anova_lm(typ=1)
    # on the single WLS fit is no reference here: statsmodels 0.14 takes its term sums of
    # squares from the unweighted design (anova1_lm_single's QR of model.exog), and its
    # nested-model p-values use each row's own residual df, so p comes from scipy instead.
    _, fit, _ = ours(case)
    terms = [t for t in fit.terms if t != "Intercept"]
    formulas = ["y ~ 1"] + [f"y ~ {' + '.join(terms[: k + 1])}" for k in range(len(terms))]
    models = [smf.wls(f, data=case.frame, weights=case.frame[case.weights]).fit() for f in formulas]
    ref = anova_lm(*models)
    table = anova_table(fit)
    assert [r.source for r in table] == [*terms, "Residual"]
    assert [r.df for r in table[:-1]] == [int(v) for v in ref["df_diff"].iloc[1:]]
    close([r.sum_sq for r in table[:-1]], ref["ss_diff"].iloc[1:], what="sum_sq")
    close([r.f_stat for r in table[:-1]], ref["F"].iloc[1:], what="F")
    close([r.p_value for r in table[:-1]], stats.f.sf(ref["F"].iloc[1:], 1, fit.df_resid), rtol=1e-7, what="p")
    assert table[-1].df == int(models[-1].df_resid)
    close(table[-1].sum_sq, models[-1].ssr, what="residual SS (weighted)")


def _assert_bands_match(b: Any, frame: pd.DataFrame) -> None:
    close(b.fit, frame["mean"], what="fitted")
    close(b.se_mean, frame["mean_se"], what="SE of mean")
    close(b.mean_low, frame["mean_ci_lower"], what="mean CI low")
    close(b.mean_high, frame["mean_ci_upper"], what="mean CI high")
    close(b.pred_low, frame["obs_ci_lower"], what="prediction low")
    close(b.pred_high, frame["obs_ci_upper"], what="prediction high")


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_bands_at_new_values_match_get_prediction(case: Case) -> None:
    # Reference: statsmodels get_prediction(exog, weights).summary_frame(alpha); for WLS the
    # new observations' weights scale the prediction variance (σ²/w) on both sides.
    design, fit, _ = ours(case)
    ref = reference(case)
    X_new = design_for(design, case.new)
    w_new = np.linspace(0.5, 2.0, len(case.new)) if case.weights else None
    if case.weights is None:
        pred = ref.get_prediction(exog=case.new)
    else:
        _, x_ref = patsy.dmatrices(case.formula, case.frame, return_type="dataframe")  # patsy's own design
        exog_new = patsy.build_design_matrices([x_ref.design_info], case.new, return_type="dataframe")[0]
        pred = ref.get_prediction(exog=exog_new, weights=w_new)
    _assert_bands_match(bands(fit, X_new, w_new), pred.summary_frame(alpha=1 - case.level))


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_bands_at_observed_rows_match_get_prediction(case: Case) -> None:
    # Reference: get_prediction() at the data (WLS: the model's own weights for a new reading).
    design, fit, w = ours(case)
    frame = reference(case).get_prediction().summary_frame(alpha=1 - case.level)
    _assert_bands_match(bands(fit, design.X, w), frame)


@pytest.mark.parametrize("case", CASES, ids=IDS)
@pytest.mark.parametrize("reading_weight", [1.0, 2.5])
def test_row_bands_agree_with_bands_at_the_rows(case: Case, reading_weight: float) -> None:
    # Reference: statsmodels get_prediction at the data's own design rows with every new
    # reading of one weight (WLS), as observations.csv, the chart band and predictions use it.
    _, fit, w = ours(case)
    res = reference(case)
    if w is None:
        pred = res.get_prediction()
    else:
        pred = res.get_prediction(exog=res.model.exog, weights=np.full(fit.n, reading_weight))
    got = row_bands(fit, w, reading_weight if w is not None else 1.0)
    _assert_bands_match(got, pred.summary_frame(alpha=1 - case.level))


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_hc3_standard_errors_match_statsmodels(case: Case) -> None:
    # Reference: statsmodels fit(cov_type="HC3") (MacKinnon & White 1985); for WLS on the
    # weighted design and residuals, as sitegen's derive step passes them.
    design, fit, w = ours(case)
    ref = reference(case, "HC3")
    sw = np.ones(fit.n) if w is None else np.sqrt(w)
    cov = hc3_cov(design.X * sw[:, None], fit.resid * sw, fit.leverage, fit.xtx_inv)
    close(np.sqrt(np.diag(cov)), ref.bse, rtol=1e-8, what="HC3 SE")
    close(cov, ref.cov_params(), rtol=1e-7, what="HC3 covariance")


# --- through analyze() and the real build ------------------------------------------------------


def write_dataset(folder: Path, case: Case, sidecar_extra: str = "") -> None:
    folder.mkdir(parents=True, exist_ok=True)
    case.frame.to_csv(folder / f"{case.name}.csv", index=False, float_format="%.17g")
    lines = [f'model = "{case.formula}"', f"level = {case.level}"]
    if case.weights:
        lines.append(f'weights = "{case.weights}"')
    (folder / f"{case.name}.toml").write_text("\n".join(lines) + "\n" + sidecar_extra, encoding="utf-8")


def analyze_case(folder: Path, case: Case, sidecar_extra: str = "") -> FitReport:
    write_dataset(folder, case, sidecar_extra)
    (source,) = discover(folder)
    return analyze(FitTask(source=source, defaults=(), limits=Limits())).report


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_robust_columns_from_analyze_match_statsmodels_hc3(tmp_path: Path, case: Case) -> None:
    # Reference: statsmodels fit(cov_type="HC3", use_t=True): SE, t-based p-values and CIs.
    report = analyze_case(tmp_path, case, "robust = true\n")
    assert report.status != "error", report.messages
    ref = reference(case, "HC3")
    ci = ref.conf_int(alpha=1 - case.level).to_numpy()
    for i, c in enumerate(report.coefficients):
        assert c.robust_std_error == pytest.approx(ref.bse.iloc[i], rel=1e-8)
        assert c.robust_p_value == pytest.approx(ref.pvalues.iloc[i], rel=1e-6)
        assert c.robust_ci_low == pytest.approx(ci[i, 0], rel=1e-8)
        assert c.robust_ci_high == pytest.approx(ci[i, 1], rel=1e-8)
        assert c.std_error != pytest.approx(c.robust_std_error, rel=1e-6)  # really the robust column


BUILD_CASES = ("line", "two_predictors_square", "no_intercept", "weighted_line")


@pytest.fixture(scope="module")
def built_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("reference-build")
    data = root / "data"
    for name in BUILD_CASES:
        write_dataset(data, BY_NAME[name])
    out = root / "site"
    assert main(["build", str(data), "-o", str(out), "-j", "1", "-q"]) == 0
    return out


def slug(name: str) -> str:
    return name.replace("_", "-")


@pytest.mark.parametrize("name", BUILD_CASES)
def test_build_outputs_match_statsmodels(built_site: Path, name: str) -> None:
    # Reference: statsmodels as above, against the files a reader downloads.
    case = BY_NAME[name]
    ref = reference(case)
    folder = built_site / "datasets" / slug(name)
    fit = json.loads((folder / "fit.json").read_text(encoding="utf-8"))
    assert fit["level"] == case.level
    for key, want in (
        ("r_squared", ref.rsquared),
        ("adj_r_squared", ref.rsquared_adj),
        ("residual_std_error", np.sqrt(ref.scale)),
        ("f_stat", ref.fvalue),
        ("f_p_value", ref.f_pvalue),
    ):
        assert fit[key] == pytest.approx(want, rel=1e-7), key
    coefs = pd.read_csv(folder / "coefficients.csv")
    assert tuple(coefs.columns[:7]) == COEFFICIENT_COLUMNS
    assert list(coefs["term"]) == list(ref.params.index)
    ci = ref.conf_int(alpha=1 - case.level).to_numpy()
    close(coefs["estimate"], ref.params, what="estimate")
    close(coefs["std_error"], ref.bse, what="SE")
    close(coefs["t_stat"], ref.tvalues, what="t")
    close(coefs["p_value"], ref.pvalues, rtol=1e-7, what="p")
    close(coefs["ci_low"], ci[:, 0], what="CI low")
    close(coefs["ci_high"], ci[:, 1], what="CI high")
    obs = pd.read_csv(folder / "observations.csv")
    assert list(obs["row"]) == list(case.frame.index)
    # Prediction intervals are for one new reading of weight 1 (the sidecar's reading_weight default).
    if case.weights is None:
        frame = ref.get_prediction().summary_frame(alpha=1 - case.level)
    else:
        new_w = np.ones(len(ref.model.endog))
        frame = ref.get_prediction(exog=ref.model.exog, weights=new_w).summary_frame(alpha=1 - case.level)
    close(obs["fitted"], frame["mean"], what="fitted")
    close(obs["mean_ci_low"], frame["mean_ci_lower"], what="mean CI low")
    close(obs["mean_ci_high"], frame["mean_ci_upper"], what="mean CI high")
    close(obs["pred_low"], frame["obs_ci_lower"], what="prediction low")
    close(obs["pred_high"], frame["obs_ci_upper"], what="prediction high")
    y = case.frame["y"].to_numpy(dtype=float)
    close(obs["residual"], y - frame["mean"].to_numpy(), rtol=1e-7, what="residual")
    summary = pd.read_csv(built_site / "summary.csv")
    row = summary.loc[summary["dataset"] == slug(name)].iloc[0]
    assert row["r_squared"] == pytest.approx(ref.rsquared, rel=1e-9)
    assert row["df_resid"] == int(ref.df_resid)
