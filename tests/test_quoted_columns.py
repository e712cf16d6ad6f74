"""Columns whose names need quoting in a formula (spaces: ``Q("kit result") ~ Q("lab result")``) get every
comparison and calibration part a plain ``y ~ x`` gets: the bias at the decision levels, the max_bias
requirement, the alternative lines and the read-back of standards.

The formula library keeps a quoted name as written, in double or single quotes; both were once read as a
transformed column, so the bias and the comparison were skipped. Independent source: statsmodels OLS
``get_prediction(...).conf_int()`` for the least-squares bias interval (the fitted mean minus the level).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from conftest import cli, fit_json, write_csv, write_toml

X = np.array([0.2 + 0.25 * i for i in range(20)])
NOISE = np.array([0.03, -0.05, 0.02, 0.06, -0.04, 0.01, -0.02, 0.05, -0.06, 0.03] * 2)
Y = np.round(1.03 * X + 0.02 + NOISE, 3)


@pytest.mark.parametrize("quote", ['"', "'"])
def test_quoted_column_names_get_the_bias_and_the_comparison(tmp_path: Path, quote: str) -> None:
    data = tmp_path / "data"
    rows = [("lab result", "kit result"), *((f"{x:.3f}", f"{y:.3f}") for x, y in zip(X, Y, strict=True))]
    formula = f"Q({quote}kit result{quote}) ~ Q({quote}lab result{quote})"
    sidecar = (
        f"model = {json.dumps(formula)}\ndecision_levels = [1.0, 4.0]\n"
        "requirements.max_bias = { at = [1.0, 4.0], limit = 0.3 }\n"
    )
    write_csv(data / "relation.csv", rows)
    write_toml(data / "relation.toml", sidecar)
    write_csv(data / "compared.csv", rows)
    write_toml(data / "compared.toml", sidecar + 'purpose = "comparison"\n')
    site = tmp_path / "site"
    assert cli("build", data, "-o", site, "-j", "1").code == 0
    rel = fit_json(site, "relation")
    texts = " ".join(m["text"] for m in rel["messages"])
    assert "comparison parts were skipped" not in texts
    # least squares (no comparison purpose): statsmodels' interval of the fitted mean, minus the level
    ols = sm.OLS(Y, sm.add_constant(X)).fit()
    pred = ols.get_prediction(sm.add_constant(np.array([1.0, 4.0]))).conf_int(alpha=0.05)
    fitted = ols.predict(sm.add_constant(np.array([1.0, 4.0])))
    for b, at, (lo, hi), f in zip(rel["bias"], (1.0, 4.0), pred, fitted, strict=True):
        assert b["line"] == "ols"
        assert b["at"] == at
        assert b["estimate"] == pytest.approx(f - at, rel=1e-9)
        assert (b["ci_low"], b["ci_high"]) == pytest.approx((lo - at, hi - at), rel=1e-9)
    assert [q["met"] for q in rel["requirements"]] == [True, True]
    assert all("cannot be judged" not in q["text"] for q in rel["requirements"])
    # a comparison: agreement, the Passing–Bablok line and its bias, judged by the requirement
    cmp = fit_json(site, "compared")
    assert cmp["agreement"]["n"] == len(X)
    assert cmp["agreement"]["mean_difference"] == pytest.approx(float(np.mean(Y - X)), rel=1e-12)
    assert [ln["method"] for ln in cmp["lines"]] == ["passing_bablok"]
    assert [b["line"] for b in cmp["bias"]] == ["passing_bablok", "passing_bablok"]
    assert [q["met"] for q in cmp["requirements"]] == [True, True]
    page = (site / "datasets" / "compared" / "index.html").read_text(encoding="utf-8")
    assert "Bias at the decision levels" in page


def test_quoted_column_names_are_read_back_as_a_calibration(tmp_path: Path) -> None:
    data = tmp_path / "data"
    levels = [0.5, 1.0, 2.0, 4.0, 8.0]
    area = [0.01 + 0.5 * v + 0.003 * (-1) ** i for i, v in enumerate(levels)]
    cells = [(v, f"{y:.4f}") for v, y in zip(levels, area, strict=True)]
    write_csv(data / "cal.csv", [("nominal conc", "peak area"), *cells])
    write_toml(data / "cal.toml", 'model = "Q(\\"peak area\\") ~ Q(\\"nominal conc\\")"\npurpose = "calibration"\n')
    site = tmp_path / "site"
    assert cli("build", data, "-o", site, "-j", "1").code == 0
    fit = fit_json(site, "cal")
    assert [b["nominal"] for b in fit["back_calculated"]] == levels
    a, b = (c["estimate"] for c in fit["coefficients"])
    for row, v, y in zip(fit["back_calculated"], levels, area, strict=True):
        assert row["found"] == pytest.approx((round(y, 4) - a) / b, rel=1e-9)  # x = (y − a)/b by hand
        assert row["percent"] == pytest.approx(100 * ((round(y, 4) - a) / b - v) / v, rel=1e-9)
