"""Comparison and calibration datasets through the real CLI: fit.json's contract fields and bad input.

The numbers in fit.json are checked against independent computations here: scipy for the
difference analysis, statsmodels' ``get_prediction(...).conf_int()`` for an OLS bias, and
statsmodels WLS for the read-back through the chosen weighting. The statistics themselves are
checked against published examples in test_comparison_stats.py and test_readback.py.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
from conftest import cli, write_csv, write_toml
from scipy import stats

# Invented kit-against-laboratory nitrate results (mg/L), test kit reading about 4 % high.
_RNG = np.random.default_rng(2026)
_TRUTH = _RNG.uniform(0.5, 12.0, 36)
LAB = np.round(_TRUTH + _RNG.normal(0, 0.12, 36), 3)
KIT = np.round(0.05 + 1.04 * _TRUTH + _RNG.normal(0, 0.15, 36), 3)
# Invented calibration standards: three replicates at six levels, scatter proportional to the level.
NOMINAL = np.repeat([0.5, 1.0, 2.0, 5.0, 10.0, 20.0], 3)
AREA = np.round((0.02 + 0.85 * NOMINAL) * (1 + _RNG.normal(0, 0.05, NOMINAL.size)), 5)


def _fit_json(site: Path, slug: str) -> dict[str, object]:
    data: dict[str, object] = json.loads((site / "datasets" / slug / "fit.json").read_text(encoding="utf-8"))
    return data


def _comparison_folder(tmp_path: Path, extra: dict[str, object] | None = None) -> Path:
    data = tmp_path / "data"
    write_csv(data / "kit.csv", [("lab", "kit"), *zip(LAB.tolist(), KIT.tolist(), strict=True)])
    keys: dict[str, object] = {"purpose": "comparison", "model": "kit ~ lab", "decision_levels": [1.0, 4.0]}
    write_toml(data / "kit.toml", keys | (extra or {}))
    return data


def test_comparison_fit_json_has_the_contract_fields(tmp_path: Path) -> None:
    data = _comparison_folder(tmp_path, {"percent_differences": True})
    result = cli("build", data, "-o", tmp_path / "site")
    assert result.code == 0, result.output
    fit = _fit_json(tmp_path / "site", "kit")
    assert fit["purpose"] == "comparison"
    page = (tmp_path / "site" / "datasets" / "kit" / "index.html").read_text(encoding="utf-8")
    assert "means" in page
    assert " p 0." not in page  # a p-value in a sentence reads "p = 0.0123" or "p < 0.0001"
    assert "p = &lt;" not in page
    assert "percent_differences = true may suit" not in page  # it is set already
    agreement = fit["agreement"]
    assert isinstance(agreement, dict)
    d = KIT - LAB
    n = d.size
    assert agreement["n"] == n
    assert agreement["mean_difference"] == pytest.approx(d.mean(), rel=1e-12)
    assert agreement["sd_difference"] == pytest.approx(d.std(ddof=1), rel=1e-12)
    lo, hi = stats.t.interval(0.95, n - 1, loc=d.mean(), scale=stats.sem(d))  # scipy, independent
    assert (agreement["mean_difference_ci_low"], agreement["mean_difference_ci_high"]) == pytest.approx((lo, hi))
    z = stats.norm.ppf(0.975)
    assert agreement["limit_low"] == pytest.approx(d.mean() - z * d.std(ddof=1), rel=1e-12)
    assert agreement["limit_high"] == pytest.approx(d.mean() + z * d.std(ddof=1), rel=1e-12)
    half = stats.t.ppf(0.975, n - 1) * np.sqrt(3 * d.var(ddof=1) / n)
    assert agreement["limit_low_ci_low"] == pytest.approx(agreement["limit_low"] - half, rel=1e-10)
    assert agreement["limit_high_ci_high"] == pytest.approx(agreement["limit_high"] + half, rel=1e-10)
    assert isinstance(fit["agreement_percent"], dict)
    assert fit["agreement_percent"]["scale"] == "percent"
    # Passing–Bablok is drawn by default for a comparison.
    lines = fit["lines"]
    assert isinstance(lines, list)
    pb = next(ln for ln in lines if ln["method"] == "passing_bablok")
    for key in ("slope", "intercept", "slope_ci_low", "slope_ci_high", "intercept_ci_low", "intercept_ci_high"):
        assert isinstance(pb[key], float)
    assert pb["slope_ci_low"] < pb["slope"] < pb["slope_ci_high"]
    # Bias at the decision levels, from the Passing–Bablok line (stated with the reason).
    assert fit["bias_line"] == "passing_bablok"
    assert "Passing–Bablok" in str(fit["bias_reason"])
    bias = fit["bias"]
    assert isinstance(bias, list)
    assert [b["at"] for b in bias] == [1.0, 4.0]
    for b in bias:
        assert b["estimate"] == pytest.approx(pb["intercept"] + (pb["slope"] - 1) * b["at"], rel=1e-12)
        assert b["ci_low"] <= b["estimate"] <= b["ci_high"]
    assert "acceptance limits" in str(fit["comparison_text"])
    # The page leads with the comparison.
    page = (tmp_path / "site" / "datasets" / "kit" / "index.html").read_text(encoding="utf-8")
    assert "Limits of agreement" in page
    assert "Bias at the decision levels" in page
    assert (tmp_path / "site" / "datasets" / "kit" / "agreement.csv").is_file()
    assert (tmp_path / "site" / "datasets" / "kit" / "bias.csv").is_file()


def test_ols_bias_through_the_cli_matches_statsmodels(tmp_path: Path) -> None:
    sm = pytest.importorskip("statsmodels.api")
    data = _comparison_folder(tmp_path, {"lines": []})
    assert cli("build", data, "-o", tmp_path / "site").code == 0
    fit = _fit_json(tmp_path / "site", "kit")
    assert fit["bias_line"] == "ols"
    res = sm.OLS(KIT, sm.add_constant(LAB)).fit()
    levels = np.array([1.0, 4.0])
    pred = res.get_prediction(sm.add_constant(levels, has_constant="add"))
    ci = pred.conf_int(alpha=0.05)
    bias = fit["bias"]
    assert isinstance(bias, list)
    for b, at, mean, (lo, hi) in zip(bias, levels, pred.predicted_mean, ci, strict=True):
        assert b["estimate"] == pytest.approx(mean - at, rel=1e-9)
        assert (b["ci_low"], b["ci_high"]) == pytest.approx((lo - at, hi - at), rel=1e-9)


def test_calibration_fit_json_read_back_and_weighting(tmp_path: Path) -> None:
    sm = pytest.importorskip("statsmodels.api")
    data = tmp_path / "data"
    write_csv(data / "std.csv", [("conc", "area"), *zip(NOMINAL.tolist(), AREA.tolist(), strict=True)])
    write_toml(data / "std.toml", {"purpose": "calibration", "model": "area ~ conc", "weighting": "choose"})
    result = cli("build", data, "-o", tmp_path / "site")
    assert result.code == 0, result.output
    fit = _fit_json(tmp_path / "site", "std")
    chosen = fit["weighting"]
    assert chosen in ("none", "1/x", "1/x²")
    w = {"none": np.ones_like(NOMINAL), "1/x": 1 / NOMINAL, "1/x²": 1 / NOMINAL**2}[str(chosen)]
    a, b = sm.WLS(AREA, sm.add_constant(NOMINAL), weights=w).fit().params  # statsmodels, independent
    coefficients = fit["coefficients"]
    assert isinstance(coefficients, list)
    coefs = {c["term"]: c["estimate"] for c in coefficients}
    assert (coefs["Intercept"], coefs["conc"]) == pytest.approx((a, b), rel=1e-9)
    back = fit["back_calculated"]
    assert isinstance(back, list)
    assert [r["nominal"] for r in back] == [0.5, 1.0, 2.0, 5.0, 10.0, 20.0]
    for r in back:
        found = ((AREA[r["nominal"] == NOMINAL] - a) / b).mean()
        assert r["found"] == pytest.approx(found, rel=1e-9)
        assert r["percent"] == pytest.approx(100 * (found - r["nominal"]) / r["nominal"], rel=1e-7)
        assert r["replicates"] == 3
    options = fit["weighting_options"]
    assert isinstance(options, list)
    best = min(options, key=lambda o: o["sum_abs_percent"])
    assert best["weighting"] == chosen
    assert best["chosen"]
    linearity = fit["linearity"]
    assert isinstance(linearity, dict)
    assert linearity["critical"] == pytest.approx(stats.f.ppf(0.99, 1, NOMINAL.size - 3), rel=1e-9)
    assert fit["working_range"] == [0.5, 20.0]
    site = tmp_path / "site" / "datasets" / "std"
    with (site / "readback.csv").open(encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == NOMINAL.size
    with (site / "observations.csv").open(encoding="utf-8") as fh:
        header = next(csv.reader(fh))
    assert "residual_percent" in header
    page = (site / "index.html").read_text(encoding="utf-8")
    assert "Standards read back" in page
    assert "Mandel" in page


@pytest.mark.parametrize(
    ("keys", "words"),
    [
        ({"purpose": "comparsion"}, "did you mean 'comparison'"),
        ({"weighting": "1/z"}, "'choose'"),
        ({"decision_levels": "4"}, "a list of numbers"),
        ({"percent_differences": "yes"}, "true or false"),
    ],
)
def test_bad_purpose_keys_are_named_without_traceback(tmp_path: Path, keys: dict[str, object], words: str) -> None:
    data = tmp_path / "data"
    write_csv(data / "d.csv", "x,y\n1,1.1\n2,2.0\n3,3.2\n4,3.9\n")
    write_toml(data / "d.toml", keys)
    write_csv(data / "ok.csv", "x,y\n1,1.1\n2,2.0\n3,3.2\n4,3.9\n")
    result = cli("build", data, "-o", tmp_path / "site")
    assert result.code == 1
    assert "Traceback" not in result.output
    fit = _fit_json(tmp_path / "site", "d")
    assert words in json.dumps(fit["messages"], ensure_ascii=False)
    assert _fit_json(tmp_path / "site", "ok")["status"] != "error"


def test_misspelt_key_gets_a_hint(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "d.csv", "x,y\n1,1.1\n2,2.0\n3,3.2\n4,3.9\n")
    write_toml(data / "d.toml", {"decison_levels": [1.0]})
    assert cli("build", data, "-o", tmp_path / "site").code == 0
    assert "did you mean 'decision_levels'" in json.dumps(_fit_json(tmp_path / "site", "d")["messages"])


def test_purpose_in_defaults_and_parts_skipped_with_a_reason(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_toml(data / "site.toml", '[defaults]\npurpose = "comparison"\n')
    write_csv(data / "a.csv", [("lab", "kit"), *zip(LAB.tolist(), KIT.tolist(), strict=True)])
    # A transformed model cannot be a method comparison: said as a warning, the fit still stands.
    write_csv(data / "b.csv", "u,v\n1,2.2\n2,3.9\n3,6.1\n4,8.3\n5,9.7\n")
    write_toml(data / "b.toml", {"model": "np.log(v) ~ u"})
    # Constant reference: the comparison parts cannot be formed, and the build does not stop.
    write_csv(data / "c.csv", "r,t\n1,1.1\n2,1.9\n3,3.2\n3,3.0\n")
    write_toml(data / "c.toml", {"model": "t ~ r", "decision_levels": [2.0], "weighting": "choose"})
    result = cli("build", data, "-o", tmp_path / "site")
    assert "Traceback" not in result.output
    a = _fit_json(tmp_path / "site", "a")
    assert a["purpose"] == "comparison"
    assert isinstance(a["agreement"], dict)
    b = _fit_json(tmp_path / "site", "b")
    assert b["agreement"] is None
    assert "comparison parts were skipped" in json.dumps(b["messages"])
    c = _fit_json(tmp_path / "site", "c")
    assert c["status"] in ("ok", "warn")


def test_max_bias_requirement_is_judged_on_the_pages_bias(tmp_path: Path) -> None:
    data = _comparison_folder(tmp_path)
    (data / "kit.toml").write_text(
        'purpose = "comparison"\nmodel = "kit ~ lab"\ndecision_levels = [1.0]\n'
        "[requirements]\nmax_bias = { at = [1.0, 8.0], limit_percent = 10 }\n",
        encoding="utf-8",
    )
    result = cli("build", data, "-o", tmp_path / "site")
    assert "Traceback" not in result.output
    fit = _fit_json(tmp_path / "site", "kit")
    bias = fit["bias"]
    assert isinstance(bias, list)
    assert [b["at"] for b in bias] == [1.0, 8.0]  # the requirement's levels join the decision levels
    assert {b["line"] for b in bias} == {"passing_bablok"}
    requirements = fit["requirements"]
    assert isinstance(requirements, list)
    judged = [r for r in requirements if r["name"] == "max_bias"]
    assert len(judged) == 2
    for r, b in zip(judged, bias, strict=True):
        assert r["value"] == pytest.approx(b["estimate"], rel=1e-12)


def test_assumed_model_with_quoted_column_names_is_compared(tmp_path: Path) -> None:
    # Without a sidecar model the columns are quoted (Q('Kit result')): still a plain response.
    data = tmp_path / "data"
    write_csv(data / "q.csv", [("Lab result", "Kit result"), *zip(LAB.tolist(), KIT.tolist(), strict=True)])
    write_toml(data / "q.toml", {"purpose": "comparison", "decision_levels": [2.0], "calibrate": [3.0]})
    assert cli("build", data, "-o", tmp_path / "site").code == 0
    fit = _fit_json(tmp_path / "site", "q")
    assert fit["model"] == "Q('Kit result') ~ Q('Lab result')"
    agreement = fit["agreement"]
    assert isinstance(agreement, dict)
    assert agreement["mean_difference"] == pytest.approx((KIT - LAB).mean(), rel=1e-12)
    assert isinstance(fit["bias"], list)
    assert len(fit["bias"]) == 1
    assert isinstance(fit["calibration"], list)
    assert len(fit["calibration"]) == 1


def test_weighted_calibration_reads_samples_back_through_its_own_line(tmp_path: Path) -> None:
    sm = pytest.importorskip("statsmodels.api")
    data = tmp_path / "data"
    write_csv(data / "std.csv", [("conc", "area"), *zip(NOMINAL.tolist(), AREA.tolist(), strict=True)])
    keys = {"purpose": "calibration", "model": "area ~ conc", "weighting": "1/x^2", "calibrate": [3.0]}
    write_toml(data / "std.toml", keys)
    assert cli("build", data, "-o", tmp_path / "site").code == 0
    fit = _fit_json(tmp_path / "site", "std")
    assert fit["weighting"] == "1/x²"
    cals = fit["calibration"]
    assert isinstance(cals, list)
    assert len(cals) == 1
    cal = cals[0]
    res = sm.WLS(AREA, sm.add_constant(NOMINAL), weights=1 / NOMINAL**2).fit()  # statsmodels, independent
    a, b = res.params
    x0 = (3.0 - a) / b
    se = np.sqrt(float(res.get_prediction(np.array([[1.0, x0]])).se_mean[0]) ** 2 + res.scale * x0**2) / abs(b)
    assert cal["estimate"] == pytest.approx(x0, rel=1e-9)
    assert cal["std_error"] == pytest.approx(se, rel=1e-8)
    assert cal["method"] == "fieller, weighted 1/x²"
    assert fit["limits"] is not None  # weighted detection limits (tests/test_weighted_calibration.py)
