"""Declared claims, one line per group, and Cochran's Q, against independent computations.

References:
- claims ("x = 1", "Intercept = 0", "x = 1, Intercept = 0"): statsmodels
  ``results.t_test`` / ``results.f_test`` on the same model (OLS and WLS);
- equal slopes across groups: statsmodels ``anova_lm`` comparing the nested models
  ``y ~ C(g) + x`` and ``y ~ C(g) * x`` (the interaction F test, common practice), and
  each group's own line from ``smf.ols`` on that group's rows;
- Cochran's Q (common practice in meta-analysis): Q = Σ wᵢ(bᵢ − b̄)², wᵢ = 1/SEᵢ²,
  referred to χ² on k − 1 df, computed directly with numpy and ``scipy.stats.chi2``,
  and as the weighted residual sum of squares of an intercept-only ``sm.WLS`` fit.

All data are invented and seeded. Unit-level checks go through ``build_design`` +
``fit_ols`` and the pure functions; end-to-end checks run the real build and read
``fit.json``.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from numpy.typing import NDArray
from scipy import stats
from statsmodels.stats.anova import anova_lm

from sitegen.cli import main
from sitegen.errors import FitError, FormulaError
from sitegen.formula import Design, build_design
from sitegen.model import ClaimTest
from sitegen.stats.claims import check_claims as run_claims
from sitegen.stats.compare import homogeneity
from sitegen.stats.groups import compare_groups
from sitegen.stats.ols import OlsFit, fit_ols

CLAIMS = ("x = 1", "Intercept = 0", "x = 1, Intercept = 0")


def _indexed(frame: pd.DataFrame) -> pd.DataFrame:
    frame.index = pd.RangeIndex(1, len(frame) + 1)
    return frame


def line_data(seed: int, slope: float, intercept: float, n: int = 24, weighted: bool = False) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    w = rng.uniform(0.3, 3.0, n)
    noise = rng.normal(0, 0.8, n) / (np.sqrt(w) if weighted else 1.0)
    return _indexed(pd.DataFrame({"x": x, "y": intercept + slope * x + noise, "w": w}))


def ours(frame: pd.DataFrame, level: float, weighted: bool) -> tuple[Design, OlsFit]:
    design = build_design("y ~ x", frame, "claims.csv", ("w",) if weighted else ())
    w = frame["w"].to_numpy(dtype=float) if weighted else None
    fit = fit_ols(design.X_ext, design.y_ext, design.terms, has_intercept=True, level=level, weights=w)
    return design, fit


def check_claim(fit: OlsFit, claim: str) -> ClaimTest:
    """One claim through sitegen's claims module (the fit carries the weighted factorisation)."""
    (found,) = run_claims(fit, [claim])
    assert isinstance(found, ClaimTest), str(found)
    return found


def reference(frame: pd.DataFrame, weighted: bool) -> Any:
    if weighted:
        return smf.wls("y ~ x", data=frame, weights=frame["w"]).fit()
    return smf.ols("y ~ x", data=frame).fit()


# Shapes: a slope near 1 (claims hold), a slope far from 1 (claims fail), and a weighted fit.
CLAIM_CASES = [
    pytest.param(1, 1.02, 0.1, 0.95, False, id="consistent"),
    pytest.param(2, 1.40, 2.5, 0.95, False, id="contradicted"),
    pytest.param(3, 0.95, -0.3, 0.90, True, id="weighted"),
]


@pytest.mark.parametrize(("seed", "slope", "intercept", "level", "weighted"), CLAIM_CASES)
@pytest.mark.parametrize("claim", CLAIMS)
def test_claim_matches_statsmodels_t_and_f_tests(
    seed: int, slope: float, intercept: float, level: float, weighted: bool, claim: str
) -> None:
    # Reference: statsmodels results.t_test (one restriction) / results.f_test (joint).
    frame = line_data(seed, slope, intercept, weighted=weighted)
    _design, fit = ours(frame, level, weighted)
    ref = reference(frame, weighted)
    got = check_claim(fit, claim)
    assert got.claim == claim
    assert got.df_den == int(ref.df_resid)
    if "," in claim:
        f = ref.f_test(claim)
        assert got.test == "F"
        assert got.df_num == int(f.df_num) == 2
        assert got.statistic == pytest.approx(float(np.squeeze(f.fvalue)), rel=1e-9)
        assert got.p_value == pytest.approx(float(f.pvalue), rel=1e-7)
    else:
        t = ref.t_test(claim)
        assert got.test == "t"
        assert got.df_num == 1
        assert got.statistic == pytest.approx(float(np.squeeze(t.tvalue)), rel=1e-9)
        assert got.p_value == pytest.approx(float(np.squeeze(t.pvalue)), rel=1e-7)
        # F = t² for a single restriction (common practice)
        assert float(np.squeeze(ref.f_test(claim).fvalue)) == pytest.approx(got.statistic**2, rel=1e-9)
    assert got.rejected is (got.p_value < 1 - level)
    assert ("contradict" in got.conclusion) is got.rejected


def test_claims_on_two_predictors_match_statsmodels() -> None:
    # Reference: statsmodels t_test / f_test with restrictions naming two terms.
    rng = np.random.default_rng(11)
    x1, x2 = rng.uniform(0, 5, 40), rng.uniform(0, 5, 40)
    frame = _indexed(pd.DataFrame({"x1": x1, "x2": x2, "y": 1 + 0.9 * x1 + 1.1 * x2 + rng.normal(0, 1, 40)}))
    design = build_design("y ~ x1 + x2", frame, "two.csv")
    fit = fit_ols(design.X_ext, design.y_ext, design.terms, has_intercept=True, level=0.95)
    ref = smf.ols("y ~ x1 + x2", data=frame).fit()
    got = check_claim(fit, "x1 = x2")
    assert got.statistic == pytest.approx(float(np.squeeze(ref.t_test("x1 = x2").tvalue)), rel=1e-9)
    got = check_claim(fit, "x1 = 1, x2 = 1, Intercept = 0")
    f = ref.f_test("x1 = 1, x2 = 1, Intercept = 0")
    assert (got.test, got.df_num) == ("F", 3)
    assert got.statistic == pytest.approx(float(np.squeeze(f.fvalue)), rel=1e-9)
    assert got.p_value == pytest.approx(float(f.pvalue), rel=1e-7)


def test_unreadable_claim_comes_back_as_a_formula_error_naming_the_terms() -> None:
    frame = line_data(4, 1.0, 0.0)
    _, fit = ours(frame, 0.95, False)
    bad, good = run_claims(fit, ["slope = 1", "x = 1"])
    assert isinstance(bad, FormulaError)
    assert "cannot be read" in str(bad)
    assert "Intercept, x" in str(bad)
    assert isinstance(good, ClaimTest)
    assert good.claim == "x = 1"


# --- one line per group --------------------------------------------------------------------------


def grouped_data(seed: int, slopes: dict[str, float], n_each: int = 15) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for i, (name, slope) in enumerate(slopes.items()):
        x = rng.uniform(0, 10, n_each)
        y = 1.0 + i * 0.7 + slope * x + rng.normal(0, 0.6, n_each)
        parts.append(pd.DataFrame({"x": x, "y": y, "site": name}))
    return _indexed(pd.concat(parts, ignore_index=True))


GROUP_CASES = [
    pytest.param(21, {"north": 0.50, "south": 0.52, "east": 0.49}, 0.95, id="common-slope"),
    pytest.param(22, {"north": 0.50, "south": 0.90, "east": 0.20}, 0.95, id="different-slopes"),
    pytest.param(23, {"upper": 1.00, "lower": 1.15}, 0.90, id="two-groups"),
]


@pytest.mark.parametrize(("seed", "slopes", "level"), GROUP_CASES)
def test_equal_slopes_f_matches_anova_of_nested_models(seed: int, slopes: dict[str, float], level: float) -> None:
    # Reference: anova_lm(ols("y ~ C(site) + x"), ols("y ~ C(site) * x")).
    frame = grouped_data(seed, slopes)
    x, y = frame["x"].to_numpy(dtype=float), frame["y"].to_numpy(dtype=float)
    labels: NDArray[np.str_] = frame["site"].to_numpy(dtype=str)
    got = compare_groups(x, y, labels, "site", level)
    reduced = smf.ols("y ~ C(site) + x", data=frame).fit()
    full = smf.ols("y ~ C(site) * x", data=frame).fit()
    ref = anova_lm(reduced, full)
    assert got.column == "site"
    assert got.df_num == int(ref["df_diff"].iloc[1]) == len(slopes) - 1
    assert got.df_den == int(ref["df_resid"].iloc[1]) == int(full.df_resid)
    assert got.f_stat == pytest.approx(float(ref["F"].iloc[1]), rel=1e-9)
    assert got.p_value == pytest.approx(float(ref["Pr(>F)"].iloc[1]), rel=1e-7)
    differ = got.p_value is not None and got.p_value < 1 - level
    assert ("slopes differ" in got.conclusion) is differ


@pytest.mark.parametrize(("seed", "slopes", "level"), GROUP_CASES)
def test_each_group_line_matches_its_own_ols_fit(seed: int, slopes: dict[str, float], level: float) -> None:
    # Reference: smf.ols("y ~ x") on each group's rows; CI at the same level.
    frame = grouped_data(seed, slopes)
    got = compare_groups(
        frame["x"].to_numpy(dtype=float),
        frame["y"].to_numpy(dtype=float),
        frame["site"].to_numpy(dtype=str),
        "site",
        level,
    )
    assert [g.group for g in got.lines] == sorted(slopes)
    for line in got.lines:
        rows = frame[frame["site"] == line.group]
        ref = smf.ols("y ~ x", data=rows).fit()
        ci = ref.conf_int(alpha=1 - level).loc["x"]
        assert line.n == len(rows)
        assert line.slope == pytest.approx(ref.params["x"], rel=1e-10)
        assert line.intercept == pytest.approx(ref.params["Intercept"], rel=1e-10)
        assert line.slope_ci_low == pytest.approx(ci.iloc[0], rel=1e-9)
        assert line.slope_ci_high == pytest.approx(ci.iloc[1], rel=1e-9)


def test_different_slopes_are_detected_and_equal_ones_are_not() -> None:
    # Sanity of the invented data: the test separates the two situations it was made for.
    common = grouped_data(21, {"north": 0.50, "south": 0.52, "east": 0.49})
    differ = grouped_data(22, {"north": 0.50, "south": 0.90, "east": 0.20})
    p = [
        compare_groups(
            f["x"].to_numpy(dtype=float),
            f["y"].to_numpy(dtype=float),
            f["site"].to_numpy(dtype=str),
            "site",
            0.95,
        ).p_value
        for f in (common, differ)
    ]
    assert p[0] is not None
    assert p[0] > 0.05
    assert p[1] is not None
    assert p[1] < 1e-6


def test_a_single_group_cannot_be_compared() -> None:
    frame = grouped_data(24, {"only": 1.0})
    with pytest.raises(FitError, match="only one value"):
        compare_groups(
            frame["x"].to_numpy(dtype=float),
            frame["y"].to_numpy(dtype=float),
            frame["site"].to_numpy(dtype=str),
            "site",
            0.95,
        )


# --- through the real build ------------------------------------------------------------------------


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("claims-groups")
    data = root / "data"
    data.mkdir()
    frame = line_data(2, 1.40, 2.5)
    frame[["x", "y"]].to_csv(data / "claimed.csv", index=False, float_format="%.17g")
    (data / "claimed.toml").write_text(
        'model = "y ~ x"\nlevel = 0.95\nclaims = ["x = 1", "Intercept = 0", "x = 1, Intercept = 0"]\n',
        encoding="utf-8",
    )
    wframe = line_data(3, 0.95, -0.3, weighted=True)
    wframe.to_csv(data / "weighed.csv", index=False, float_format="%.17g")
    (data / "weighed.toml").write_text(
        'model = "y ~ x"\nlevel = 0.9\nweights = "w"\nclaims = ["x = 1", "x = 1, Intercept = 0"]\n',
        encoding="utf-8",
    )
    grouped_data(22, {"north": 0.50, "south": 0.90, "east": 0.20}).to_csv(
        data / "grouped.csv", index=False, float_format="%.17g"
    )
    (data / "grouped.toml").write_text('model = "y ~ x"\ngroup = "site"\n', encoding="utf-8")
    out = root / "site"
    assert main(["build", str(data), "-o", str(out), "-j", "1", "-q"]) in (0, 1)
    return out


def fit_json(site: Path, slug: str) -> dict[str, Any]:
    body = json.loads((site / "datasets" / slug / "fit.json").read_text(encoding="utf-8"))
    assert body["status"] != "error", body["messages"]
    assert isinstance(body, dict)
    return body


@pytest.mark.parametrize(("slug", "weighted"), [("claimed", False), ("weighed", True)])
def test_build_claims_match_statsmodels(built: Path, slug: str, weighted: bool) -> None:
    # Reference: statsmodels t_test / f_test on the same CSV.
    body = fit_json(built, slug)
    frame = pd.read_csv(built.parent / "data" / f"{slug}.csv")
    ref = reference(frame, weighted)
    assert [c["claim"] for c in body["claims"]] == (
        list(CLAIMS) if slug == "claimed" else ["x = 1", "x = 1, Intercept = 0"]
    )
    for c in body["claims"]:
        if c["test"] == "t":
            t = ref.t_test(c["claim"])
            assert c["statistic"] == pytest.approx(float(np.squeeze(t.tvalue)), rel=1e-9)
            assert c["p_value"] == pytest.approx(float(np.squeeze(t.pvalue)), rel=1e-7, abs=1e-300)
        else:
            f = ref.f_test(c["claim"])
            assert c["df_num"] == int(f.df_num)
            assert c["statistic"] == pytest.approx(float(np.squeeze(f.fvalue)), rel=1e-9)
            assert c["p_value"] == pytest.approx(float(f.pvalue), rel=1e-7, abs=1e-300)
        assert c["df_den"] == int(ref.df_resid)
        assert c["rejected"] is (c["p_value"] < 1 - body["level"])


def test_build_group_comparison_matches_anova_of_nested_models(built: Path) -> None:
    # Reference: anova_lm of y ~ C(site) + x against y ~ C(site) * x; per-group smf.ols.
    body = fit_json(built, "grouped")
    frame = pd.read_csv(built.parent / "data" / "grouped.csv")
    ref = anova_lm(smf.ols("y ~ C(site) + x", data=frame).fit(), smf.ols("y ~ C(site) * x", data=frame).fit())
    g = body["groups"]
    assert g["column"] == "site"
    assert g["df_num"] == 2
    assert g["df_den"] == int(ref["df_resid"].iloc[1])
    assert g["f_stat"] == pytest.approx(float(ref["F"].iloc[1]), rel=1e-9)
    assert g["p_value"] == pytest.approx(float(ref["Pr(>F)"].iloc[1]), rel=1e-7)
    for line in g["lines"]:
        own = smf.ols("y ~ x", data=frame[frame["site"] == line["group"]]).fit()
        assert line["slope"] == pytest.approx(own.params["x"], rel=1e-10)
        assert line["intercept"] == pytest.approx(own.params["Intercept"], rel=1e-10)


# --- Cochran's Q ------------------------------------------------------------------------------------


def direct_q(b: NDArray[np.float64], se: NDArray[np.float64]) -> tuple[float, int, float, float, float]:
    """Cochran's Q written out: weights 1/SE², inverse-variance pooled mean, χ²(k − 1) tail."""
    w = 1.0 / se**2
    pooled = float(np.sum(w * b) / np.sum(w))
    q = float(np.sum(w * (b - pooled) ** 2))
    df = len(b) - 1
    return q, df, float(stats.chi2.sf(q, df)), pooled, float(np.sqrt(1.0 / np.sum(w)))


@pytest.mark.parametrize("seed", [31, 32, 33])
@pytest.mark.parametrize("k", [2, 5, 12])
def test_cochran_q_matches_a_direct_chi_square_computation(seed: int, k: int) -> None:
    # Reference: numpy + scipy.stats.chi2 (formula in the module docstring).
    rng = np.random.default_rng(seed * 100 + k)
    b = rng.normal(0.5, 0.2, k)
    se = rng.uniform(0.05, 0.3, k)
    got = homogeneity(list(b), list(se))
    assert got is not None
    q, df, p, pooled, pooled_se = direct_q(b, se)
    assert got.df == df
    assert got.q == pytest.approx(q, rel=1e-12)
    assert got.p_value == pytest.approx(p, rel=1e-10)
    assert got.p_value == pytest.approx(1.0 - stats.chi2.cdf(q, df), rel=1e-6, abs=1e-12)
    assert got.pooled == pytest.approx(pooled, rel=1e-12)
    assert got.pooled_se == pytest.approx(pooled_se, rel=1e-12)
    # Independent route: Q is the weighted residual SS of an intercept-only WLS fit, whose
    # constant is the pooled estimate (common practice).
    wls = sm.WLS(b, np.ones((k, 1)), weights=1.0 / se**2).fit()
    assert got.q == pytest.approx(float(wls.ssr), rel=1e-10)
    assert got.pooled == pytest.approx(float(wls.params[0]), rel=1e-12)


def test_cochran_q_skips_unusable_estimates_and_needs_two() -> None:
    # Reference: the direct computation on the usable estimates only.
    b = [0.4, 0.55, float("nan"), 0.61, 0.5]
    se = [0.1, 0.08, 0.1, float("inf"), 0.0]
    got = homogeneity(b, se)
    assert got is not None
    q, df, p, _, _ = direct_q(np.array([0.4, 0.55]), np.array([0.1, 0.08]))
    assert got.df == df
    assert got.q == pytest.approx(q, rel=1e-12)
    assert got.p_value == pytest.approx(p, rel=1e-10)
    assert homogeneity([0.4], [0.1]) is None
    assert homogeneity([0.4, 0.5], [0.1, 0.0]) is None


def test_identical_estimates_give_q_zero_and_p_one() -> None:
    got = homogeneity([1.25, 1.25, 1.25], [0.1, 0.2, 0.3])
    assert got is not None
    assert got.q == pytest.approx(0.0, abs=1e-24)
    assert got.p_value == pytest.approx(1.0)


@pytest.mark.parametrize("df", [1, 2, 3, 7, 30, 199])
def test_chi2_upper_tail_matches_scipy(df: int) -> None:
    """Our χ² tail (used for Cochran's Q) against scipy.stats.chi2.sf as the reference."""
    from scipy import stats

    from sitegen.stats.distributions import chi2_sf

    for x in (0.0, 1e-6, 0.3, 1.0, df * 0.5, float(df), df + 1.0, df * 2.0, df * 5.0 + 10, 400.0):
        want = float(stats.chi2.sf(x, df))
        got = chi2_sf(x, df)
        assert got == pytest.approx(want, rel=1e-9, abs=1e-15), (x, df)
