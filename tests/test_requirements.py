"""Declared requirements ([requirements]): validation, judgement, every place they are reported, --enforce.

Independent sources beside each check:
* NIST StRD Norris (tests/data/nist/, certified values in certified.json): R², slope, intercept, their
  standard errors and the residual SD the criteria are judged on; the t quantile for the intervals from scipy.
* The fluorescence calibration of Miller & Miller (tests/data/textbook/, see its source note): standards
  read back through the line, recomputed here with numpy's polyfit.
* statsmodels' get_prediction: the bias (fitted y − x) at chosen levels and its confidence interval.
"""

from __future__ import annotations

import csv
import json
import shutil
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import scipy.stats
import statsmodels.api as sm
from conftest import cli, fit_json, write_csv, write_toml
from nist_data import load_nist

TEXTBOOK = Path(__file__).resolve().parent / "data" / "textbook"


def _build(data: Path, site: Path, *extra: str) -> tuple[int, str]:
    result = cli("build", data, "-o", site, "-j", "1", *extra)
    return result.code, result.output


def _requirements(site: Path, slug: str) -> dict[str, dict[str, Any]]:
    reqs = fit_json(site, slug)["requirements"]
    assert isinstance(reqs, list)
    return {str(q["name"]) + (f"@{q['at']}" if q.get("at") is not None else ""): q for q in reqs}


def _summary(site: Path) -> dict[str, dict[str, str]]:
    with (site / "summary.csv").open(encoding="utf-8", newline="") as f:
        return {row["dataset"]: row for row in csv.DictReader(f)}


# --- validation --------------------------------------------------------------------------------


def test_misspelt_criterion_fails_that_dataset_naming_sidecar_and_closest_key(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n")
    write_toml(data / "a.toml", "[requirements]\nmin_rsquared = 0.99\n")
    write_csv(data / "b.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n")
    code, out = _build(data, tmp_path / "site")
    assert code == 1  # the other dataset is still built
    assert "a.toml" in out
    assert "min_rsquared" in out
    assert "did you mean 'min_r_squared'" in out
    assert "Traceback" not in out
    assert _summary(tmp_path / "site")["b"]["status"] != "error"


@pytest.mark.parametrize("name", ["requirement", "requirments", "Requirements"])
def test_misspelt_requirements_table_fails_that_dataset_instead_of_dropping_its_criteria(
    tmp_path: Path, name: str
) -> None:
    # A misspelt table name would otherwise be one more unknown key (a warning), every criterion in it
    # dropped, and --enforce would exit 0 on data that do not meet them.
    data = tmp_path / "data"
    write_csv(data / "a.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n")
    write_toml(data / "a.toml", f"[{name}]\nmin_r_squared = 0.99999\n")
    write_csv(data / "b.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n")
    code, out = _build(data, tmp_path / "site", "--enforce")
    assert code == 1
    assert "a.toml" in out
    assert f"'{name}'" in out
    assert "[requirements]" in out
    assert "Traceback" not in out
    summary = _summary(tmp_path / "site")
    assert summary["a"]["status"] == "error"
    assert summary["b"]["status"] != "error"


@pytest.mark.parametrize(
    ("table", "words"),
    [
        ("slope_within = [1.1, 0.9]", "low ≤ high"),
        ("slope_within = 1.0", "window of two numbers"),
        ("min_r_squared = 1.5", "from 0 to 1"),
        ("max_bias = { at = [1.0] }", "at least one of 'limit' and 'limit_percent'"),
        ("max_bias = { at = [1.0], limt = 0.1 }", "did you mean 'limit'"),
        ("lowest_within_percent = 20", "needs 'back_calculated_within_percent'"),
        ("back_calculated_within_percent = -5", "percentage above 0"),
        ("max_residual_sd = 'small'", "finite number"),
    ],
)
def test_bad_criterion_values_are_named(tmp_path: Path, table: str, words: str) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n")
    write_toml(data / "a.toml", f"[requirements]\n{table}\n")
    code, out = _build(data, tmp_path / "site")
    assert code == 1
    assert words in out
    assert "a.toml" in out
    assert "[requirements]" in out
    assert "Traceback" not in out


def test_misspelt_criterion_in_site_defaults_stops_the_build(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n")
    write_toml(data / "site.toml", "[defaults.requirements]\nmax_residual_s = 0.1\n")
    code, out = _build(data, tmp_path / "site")
    assert code == 2
    assert "site.toml" in out
    assert "did you mean 'max_residual_sd'" in out
    assert not (tmp_path / "site").exists()


# --- judgement against certified values ----------------------------------------------------------


def _norris(tmp_path: Path, requirements: str) -> Path:
    case = load_nist("Norris")
    data = tmp_path / "data"
    data.mkdir()
    shutil.copyfile(case.csv_path, data / "norris.csv")
    write_toml(data / "norris.toml", f'model = "y ~ x"\n[requirements]\n{requirements}\n')
    return data


def test_norris_criteria_judged_on_certified_figures(tmp_path: Path) -> None:
    """NIST StRD Norris: slope 1.00211681802045 (SE 4.298e-4), intercept −0.262323 (SE 0.232818),
    residual SD 0.884796, R² 0.999993746, 34 residual df; t quantile from scipy."""
    case = load_nist("Norris")
    b0, b1 = case.coefficients
    se0, se1 = case.std_errors
    t = scipy.stats.t.ppf(0.975, case.df_residual)
    data = _norris(
        tmp_path,
        "min_r_squared = 0.99999\nslope_within = [0.999, 1.001]\nintercept_within = [-0.5, 0.5]\n"
        "slope_interval_includes = 1\nintercept_interval_includes = 0\nmax_residual_sd = 0.88\nmin_n = 30\n",
    )
    site = tmp_path / "site"
    assert _build(data, site)[0] == 0
    got = _requirements(site, "norris")
    assert list(got) == [
        "min_r_squared",
        "slope_within",
        "intercept_within",
        "slope_interval_includes",
        "intercept_interval_includes",
        "max_residual_sd",
        "min_n",
    ]
    assert got["min_r_squared"]["met"] is True
    assert got["min_r_squared"]["value"] == pytest.approx(case.r_squared, rel=1e-9)
    assert got["min_r_squared"]["limit"] == 0.99999
    # slope 1.00212 is above the window [0.999, 1.001]
    assert got["slope_within"]["met"] is False
    assert got["slope_within"]["value"] == pytest.approx(b1, rel=1e-10)
    assert got["slope_within"]["limit"] == [0.999, 1.001]
    lo, hi = got["slope_within"]["interval"]
    assert lo == pytest.approx(b1 - t * se1, rel=1e-8)
    assert hi == pytest.approx(b1 + t * se1, rel=1e-8)
    assert "above the window" in str(got["slope_within"]["text"])
    assert got["intercept_within"]["met"] is True
    assert got["intercept_within"]["value"] == pytest.approx(b0, rel=1e-8)
    # the slope's interval (1.00124 to 1.00299) excludes 1; the intercept's (−0.735 to 0.211) includes 0
    assert b1 - t * se1 > 1
    assert got["slope_interval_includes"]["met"] is False
    assert "contradict" in str(got["slope_interval_includes"]["text"])
    assert b0 - t * se0 < 0 < b0 + t * se0
    assert got["intercept_interval_includes"]["met"] is True
    ilo, ihi = got["intercept_interval_includes"]["interval"]
    assert ilo == pytest.approx(b0 - t * se0, rel=1e-8)
    assert ihi == pytest.approx(b0 + t * se0, rel=1e-8)
    assert got["max_residual_sd"]["value"] == pytest.approx(case.residual_sd, rel=1e-9)
    assert got["max_residual_sd"]["met"] is False  # 0.8848 > 0.88
    assert got["min_n"]["met"] is True
    assert got["min_n"]["value"] == 36
    for q in got.values():
        assert {"name", "met", "value", "limit", "text"} <= set(q)
        assert str(q["text"]).startswith("Met:" if q["met"] else "Not met:")


def test_a_criterion_the_model_cannot_answer_is_not_met(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n5,9.9\n")
    write_toml(
        data / "a.toml",
        'model = "y ~ x - 1"\n[requirements]\nintercept_interval_includes = 0\nmin_r_squared = 0.9\n',
    )
    site = tmp_path / "site"
    code, _ = _build(data, site, "--enforce")
    assert code == 3
    got = _requirements(site, "a")
    assert got["intercept_interval_includes"]["met"] is False
    assert got["intercept_interval_includes"]["judged"] is False
    assert "no intercept" in str(got["intercept_interval_includes"]["text"])
    assert got["min_r_squared"]["met"] is True


def test_standards_read_back_as_numpy_computes_them(tmp_path: Path) -> None:
    """Miller & Miller's fluorescence calibration; read-back recomputed with numpy.polyfit."""
    data = tmp_path / "data"
    data.mkdir()
    shutil.copyfile(TEXTBOOK / "fluorescence_calibration.csv", data / "fluo.csv")
    write_toml(
        data / "fluo.toml",
        'model = "intensity ~ concentration"\n[requirements]\n'
        "back_calculated_within_percent = 5\nlowest_within_percent = 20\n",
    )
    site = tmp_path / "site"
    assert _build(data, site)[0] == 0
    table = np.loadtxt(data / "fluo.csv", delimiter=",", skiprows=1)
    x, y = table[:, 0], table[:, 1]
    slope, intercept = np.polyfit(x, y, 1)
    found = (y - intercept) / slope
    standards = x != 0  # the blank has no relative error
    percent = 100 * (found[standards] - x[standards]) / x[standards]
    lowest = x[standards].min()
    at_lowest = x[standards] == lowest
    got = _requirements(site, "fluo")
    assert got["back_calculated_within_percent"]["value"] == pytest.approx(np.abs(percent[~at_lowest]).max(), rel=1e-9)
    assert got["lowest_within_percent"]["value"] == pytest.approx(np.abs(percent[at_lowest]).max(), rel=1e-9)
    assert got["back_calculated_within_percent"]["met"] is bool(np.all(np.abs(percent[~at_lowest]) <= 5))
    assert got["lowest_within_percent"]["met"] is bool(np.all(np.abs(percent[at_lowest]) <= 20))
    assert "blank" in str(got["back_calculated_within_percent"]["text"])


def test_bias_at_levels_matches_statsmodels_prediction(tmp_path: Path) -> None:
    """Bias = fitted y − x at each level, its interval the mean-response interval (statsmodels get_prediction)."""
    rows = [(0.5, 0.56), (1.0, 1.02), (1.5, 1.62), (2.0, 2.11), (3.0, 3.09), (4.0, 4.26), (5.0, 5.22), (6.0, 6.31)]
    data = tmp_path / "data"
    write_csv(data / "kit.csv", [("lab", "kit"), *rows])
    write_toml(
        data / "kit.toml",
        'model = "kit ~ lab"\nunits = { lab = "mg/L", kit = "mg/L" }\n'
        "[requirements]\nmax_bias = { at = [1.0, 4.0, 10.0], limit = 0.1, limit_percent = 5 }\n",
    )
    site = tmp_path / "site"
    code, _ = _build(data, site, "--enforce")
    x = np.array([r[0] for r in rows])
    y = np.array([r[1] for r in rows])
    pred = (
        sm.OLS(y, sm.add_constant(x))
        .fit()
        .get_prediction(sm.add_constant(np.array([1.0, 4.0, 10.0]), has_constant="add"))
    )
    frame = pred.summary_frame(alpha=0.05)
    got = _requirements(site, "kit")
    verdicts = []
    for i, at in enumerate((1.0, 4.0, 10.0)):
        q = got[f"max_bias@{at}"]
        bias = frame["mean"].iloc[i] - at
        assert q["value"] == pytest.approx(bias, rel=1e-9)
        lo, hi = q["interval"]
        assert lo == pytest.approx(frame["mean_ci_lower"].iloc[i] - at, rel=1e-9)
        assert hi == pytest.approx(frame["mean_ci_upper"].iloc[i] - at, rel=1e-9)
        allowed = max(0.1, 0.05 * at)  # the larger of the two limits
        assert q["limit"] == pytest.approx(allowed)
        assert q["met"] is bool(abs(bias) <= allowed)
        verdicts.append(q["met"])
    assert "outside the data" in str(got["max_bias@10.0"]["text"])
    # The allowed bias is made of declared numbers, so it reads as written (0.5, not 0.5000).
    assert "±0.5 mg/L (the larger of 0.1 mg/L and 5 % of the level)" in str(got["max_bias@10.0"]["text"])
    assert code == (0 if all(verdicts) else 3)


# --- everywhere they are reported, and the exit status -------------------------------------------


def _two(tmp_path: Path, *, second_met: bool) -> Path:
    data = tmp_path / "data"
    write_csv(data / "good.csv", "x,y\n1,2.0\n2,4.0\n3,6.1\n4,8.0\n5,10.0\n6,12.1\n")
    write_toml(data / "good.toml", "[requirements]\nmin_r_squared = 0.99\n")
    write_csv(data / "other.csv", "x,y\n1,2.3\n2,3.6\n3,6.6\n4,7.5\n5,10.4\n6,11.6\n")
    limit = 0.99 if not second_met else 0.9
    write_toml(data / "other.toml", f"[requirements]\nmin_r_squared = {limit}\nslope_within = [1.5, 2.5]\n")
    write_csv(data / "plain.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n")
    return data


def test_unmet_requirement_everywhere_and_enforce_exits_3(tmp_path: Path) -> None:
    data = _two(tmp_path, second_met=False)
    site = tmp_path / "site"
    code, out = _build(data, site)
    assert code == 0  # without --enforce, as before
    assert "other.csv" in out
    assert "not met" in out
    code, _ = _build(data, site, "--enforce")
    assert code == 3
    # a rebuild with nothing to do still knows
    assert _build(data, site, "--enforce")[0] == 3
    summary = _summary(site)
    with (site / "summary.csv").open(encoding="utf-8") as f:
        header = f.readline().strip().split(",")
    assert header[-1] == "requirements"
    assert {k: v["requirements"] for k, v in summary.items()} == {"good": "met", "other": "unmet", "plain": "none"}
    body = json.loads((site / "summary.json").read_text(encoding="utf-8"))
    assert {r["dataset"]: r["requirements"] for r in body} == {"good": "met", "other": "unmet", "plain": "none"}
    assert fit_json(site, "plain").get("requirements") == []
    page = (site / "datasets" / "other" / "index.html").read_text(encoding="utf-8")
    assert 'id="requirements"' in page
    assert "not met" in page
    head = page.split('<p class="sentence">')[1].split("</p>")[0]
    assert "1 of 2 declared requirements is not met (min_r_squared)" in head
    assert page.index('id="requirements"') < page.index('id="h-trust"')  # near the top
    index = (site / "index.html").read_text(encoding="utf-8")
    assert 'data-requirements="unmet"' in index
    assert 'data-requirements="met"' in index
    assert 'data-requirements="none"' in index
    assert '<select name="requirements">' in index
    assert "Requirements not met: min_r_squared" in index


def test_met_requirements_exit_0_with_enforce(tmp_path: Path) -> None:
    data = _two(tmp_path, second_met=True)
    assert _build(data, tmp_path / "site", "--enforce")[0] == 0


def test_a_failed_dataset_wins_over_unmet_requirements(tmp_path: Path) -> None:
    data = _two(tmp_path, second_met=False)
    write_csv(data / "broken.csv", "x,y\n1,a\n2,b\n")
    assert _build(data, tmp_path / "site", "--enforce")[0] == 1


def test_site_defaults_and_sidecar_merge_key_by_key(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_toml(data / "site.toml", "[defaults.requirements]\nmin_r_squared = 0.999\nmin_n = 4\n")
    write_csv(data / "a.csv", "x,y\n1,2.3\n2,3.6\n3,6.6\n4,7.5\n5,10.4\n6,11.6\n")
    write_toml(data / "a.toml", "[requirements]\nmin_r_squared = 0.9\nslope_within = [1.5, 2.5]\n")
    write_csv(data / "b.csv", "x,y\n1,2.3\n2,3.6\n3,6.6\n4,7.5\n5,10.4\n6,11.6\n")
    site = tmp_path / "site"
    assert _build(data, site, "--enforce")[0] == 3
    a = _requirements(site, "a")
    assert list(a) == ["min_r_squared", "slope_within", "min_n"]
    assert a["min_r_squared"]["limit"] == 0.9
    assert all(q["met"] for q in a.values())
    b = _requirements(site, "b")
    assert list(b) == ["min_r_squared", "min_n"]
    assert b["min_r_squared"]["met"] is False


def test_contradicted_claim_reaches_headline_status_and_index(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", "x,y\n1,2.0\n2,4.0\n3,6.1\n4,8.0\n5,10.0\n6,12.1\n")
    write_toml(data / "a.toml", 'claims = ["x = 1"]\n')
    site = tmp_path / "site"
    assert _build(data, site)[0] == 0
    assert _summary(site)["a"]["status"] == "warn"
    page = (site / "datasets" / "a" / "index.html").read_text(encoding="utf-8")
    head = page.split('<p class="sentence">')[1].split("</p>")[0]
    assert "The data contradict the declared claim “x = 1”" in head
    trust = page.split('id="h-trust"')[1].split("</p>")[0]
    assert "contradict 1 of the 1 declared claim" in trust
    index = (site / "index.html").read_text(encoding="utf-8")
    assert "Declared claim &#39;x = 1&#39;" in index or "Declared claim 'x = 1'" in index


def test_comparison_bias_comes_from_the_recommended_line(tmp_path: Path) -> None:
    """With purpose = "comparison" the bias is read from the line the page recommends, the same figures as the
    page's bias at the decision levels (fit.json ``bias``)."""
    rows = [(0.5, 0.56), (1.0, 1.02), (1.5, 1.62), (2.0, 2.11), (3.0, 3.09), (4.0, 4.26), (5.0, 5.22), (6.0, 6.31)]
    data = tmp_path / "data"
    write_csv(data / "kit.csv", [("lab", "kit"), *rows])
    write_toml(
        data / "kit.toml",
        'model = "kit ~ lab"\npurpose = "comparison"\ndecision_levels = [1.0, 4.0]\n'
        "[requirements]\nmax_bias = { at = [1.0, 4.0], limit = 0.2 }\n",
    )
    site = tmp_path / "site"
    _build(data, site)
    fit = fit_json(site, "kit")
    listed = fit["bias"]
    assert isinstance(listed, list)
    bias = {b["at"]: b for b in listed}
    got = _requirements(site, "kit")
    for at in (1.0, 4.0):
        q = got[f"max_bias@{at}"]
        assert q["value"] == pytest.approx(bias[at]["estimate"], rel=1e-12)
        assert q["interval"] == pytest.approx([bias[at]["ci_low"], bias[at]["ci_high"]], rel=1e-12)
        assert "read from the" in q["text"]
