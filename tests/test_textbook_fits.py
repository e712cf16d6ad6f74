"""Published textbook fits, run through the whole build and read back from the site.

Sources (each named again beside its checks):
- F. J. Anscombe, "Graphs in Statistical Analysis", The American Statistician 27(1),
  17-21 (1973): four data sets with the same fitted line; the paper's table of shared
  results is quoted from memory (n 11, mean x 9.0, mean y 7.5, y = 3 + 0.5x,
  Σ(x − x̄)² = 110.0, regression SS 27.50, residual SS 13.75 on 9 df, SE of the slope
  0.118, R² 0.667). Data: tests/data/textbook/anscombe_quartet.csv.
- S. Weisberg, "Applied Linear Regression" (3rd ed. 2005), Forbes's boiling-point data:
  lpres = −42.138 + 0.895 bp, σ̂ 0.379, R² 0.995, case 12 the outlier (from memory).
  Data: tests/data/textbook/forbes_boiling_point.csv (see its .source.txt).
- J. N. Miller & J. C. Miller, "Statistics and Chemometrics for Analytical Chemistry",
  fluorescence calibration example: b 1.93, a 1.52, s_y/x 0.4329, r 0.9989, and
  y0 = 2.9, 13.5, 23.0 → x0 = 0.72, 6.21, 11.13 (from memory).
  Data: tests/data/textbook/fluorescence_calibration.csv.

Values typed from memory are also checked for internal consistency (each set of
printed results must follow from the others by the textbook formulas).
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from sitegen.cli import main

TEXTBOOK = Path(__file__).resolve().parent / "data" / "textbook"


@pytest.fixture(scope="module")
def site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One build of every textbook dataset (Anscombe's four in a section of their own)."""
    root = tmp_path_factory.mktemp("textbook")
    data = root / "data"
    quartet = pd.read_csv(TEXTBOOK / "anscombe_quartet.csv")
    (data / "anscombe").mkdir(parents=True)
    for k in range(1, 5):
        part = quartet[[f"x{k}", f"y{k}"]].rename(columns={f"x{k}": "x", f"y{k}": "y"})
        part.to_csv(data / "anscombe" / f"set{k}.csv", index=False)
        (data / "anscombe" / f"set{k}.toml").write_text(
            f'title = "Anscombe set {k}"\nmodel = "y ~ x"\n', encoding="utf-8"
        )
    forbes = (TEXTBOOK / "forbes_boiling_point.csv").read_bytes()
    (data / "forbes_lpres.csv").write_bytes(forbes)
    (data / "forbes_lpres.toml").write_text('model = "lpres ~ bp"\n', encoding="utf-8")
    (data / "forbes_pres.csv").write_bytes(forbes)
    (data / "forbes_pres.toml").write_text('model = "I(100 * np.log10(pres)) ~ bp"\n', encoding="utf-8")
    (data / "fluorescence.csv").write_bytes((TEXTBOOK / "fluorescence_calibration.csv").read_bytes())
    (data / "fluorescence.toml").write_text(
        'model = "intensity ~ concentration"\ncalibrate = [2.9, 13.5, 23.0]\n', encoding="utf-8"
    )
    out = root / "site"
    assert main(["build", str(data), "-o", str(out), "-j", "1", "-q"]) == 0
    return out


def report(site: Path, slug: str) -> dict[str, Any]:
    body = json.loads((site / "datasets" / slug / "fit.json").read_text(encoding="utf-8"))
    assert isinstance(body, dict)
    assert body["status"] in ("ok", "warn"), body["messages"]
    return body


def coef(body: dict[str, Any], term: str) -> dict[str, Any]:
    (found,) = [c for c in body["coefficients"] if c["term"] == term]
    assert isinstance(found, dict)
    return found


def anova_ss(body: dict[str, Any], source: str) -> float:
    (row,) = [a for a in body["anova"] if a["source"] == source]
    return float(row["sum_sq"])


# --- Anscombe (1973) --------------------------------------------------------------------------------


def test_anscombe_paper_values_are_internally_consistent() -> None:
    # Anscombe (1973), from memory: the printed results must follow from each other.
    sxx, b, reg_ss, res_ss, df = 110.0, 0.5, 27.50, 13.75, 9
    assert b * b * sxx == pytest.approx(reg_ss)  # regression SS = b²·Sxx
    assert math.sqrt(res_ss / df / sxx) == pytest.approx(0.118, abs=5e-4)  # SE(b) = √(s²/Sxx)
    assert reg_ss / (reg_ss + res_ss) == pytest.approx(0.667, abs=5e-4)  # R²
    assert 7.5 - b * 9.0 == pytest.approx(3.0)  # intercept = ȳ − b·x̄


@pytest.mark.parametrize("k", [1, 2, 3, 4])
def test_anscombe_quartet_through_the_build(site: Path, k: int) -> None:
    # Source: Anscombe (1973), the table shared by all four sets (from memory), at the
    # paper's rounding: y = 3.00 + 0.500x, R² 0.67, SE(b) 0.118, n 11, 9 residual df,
    # regression SS 27.50 and residual SS 13.75 (the paper rounds these; the four sets
    # agree with them to ±0.03).
    body = report(site, f"anscombe-set{k}")
    assert body["section"] == "anscombe"
    assert body["n"] == 11
    assert body["df_resid"] == 9
    assert round(coef(body, "Intercept")["estimate"], 2) == 3.00
    assert round(coef(body, "x")["estimate"], 3) == 0.500
    assert round(coef(body, "x")["std_error"], 3) == 0.118
    assert round(body["r_squared"], 2) == 0.67
    assert anova_ss(body, "x") == pytest.approx(27.50, abs=0.03)
    assert anova_ss(body, "Residual") == pytest.approx(13.75, abs=0.03)
    # residual SD √(13.75/9) = 1.236 (consistency with the paper's residual SS)
    assert body["residual_std_error"] == pytest.approx(math.sqrt(13.75 / 9), abs=2e-3)
    # the paper's t for the slope, b / SE(b) = 0.5 / 0.118 = 4.24
    assert round(coef(body, "x")["t_stat"], 2) == pytest.approx(4.24, abs=0.01)


def test_anscombe_sets_share_their_line_but_not_their_diagnostics(site: Path) -> None:
    # Anscombe's point (1973): identical summaries, very different data. The shared
    # numbers agree across the four sets to the paper's rounding; the flagged rows do not.
    bodies = [report(site, f"anscombe-set{k}") for k in range(1, 5)]
    slopes = [coef(b, "x")["estimate"] for b in bodies]
    assert max(slopes) - min(slopes) < 1e-3
    flagged = [tuple(sorted(f["row"] for f in b["flagged"])) for b in bodies]
    assert len(set(flagged)) > 1


# --- Forbes (Weisberg, Applied Linear Regression) -------------------------------------------------


def test_forbes_tabulated_lpres_is_100_log10_pres_rounded() -> None:
    # Source: Weisberg, ALR (from memory): lpres = 100·log10(pres), tabulated to 2 decimals.
    data = pd.read_csv(TEXTBOOK / "forbes_boiling_point.csv")
    assert len(data) == 17
    np.testing.assert_allclose(data["lpres"], 100 * np.log10(data["pres"]), atol=0.005 + 1e-9)


def test_forbes_boiling_point_through_the_build(site: Path) -> None:
    # Source: Weisberg, Applied Linear Regression, 3rd ed., Forbes's data (from memory):
    # lpres = −42.138 + 0.895 bp, σ̂ = 0.379, R² = 0.995, 15 residual df.
    body = report(site, "forbes-lpres")
    assert body["n"] == 17
    assert body["df_resid"] == 15
    assert round(coef(body, "Intercept")["estimate"], 3) == -42.138
    assert round(coef(body, "bp")["estimate"], 3) == 0.895
    assert round(coef(body, "bp")["estimate"], 4) == 0.8955
    assert round(body["residual_std_error"], 3) == 0.379
    assert round(body["r_squared"], 3) == 0.995
    # Consistency of the printed results: R² = 1 − 15 σ̂² / Σ(y − ȳ)², with the data's own TSS.
    y = pd.read_csv(TEXTBOOK / "forbes_boiling_point.csv")["lpres"].to_numpy(dtype=float)
    tss = float(np.sum((y - y.mean()) ** 2))
    assert 1 - 15 * 0.379**2 / tss == pytest.approx(0.995, abs=5e-4)


def test_forbes_case_12_is_the_outlier(site: Path) -> None:
    # Source: Weisberg, ALR (from memory): case 12 stands out, residual ≈ 1.36, every
    # other residual under 0.35 in size.
    body = report(site, "forbes-lpres")
    obs = pd.read_csv(site / "datasets" / "forbes-lpres" / "observations.csv")
    worst = int(np.argmax(obs["residual"].abs().to_numpy()))
    assert int(obs["row"].iloc[worst]) == 12
    assert float(obs["residual"].iloc[worst]) == pytest.approx(1.36, abs=0.01)
    assert float(obs.loc[obs["row"] != 12, "residual"].abs().max()) < 0.35
    assert 12 in [f["row"] for f in body["flagged"]]


def test_forbes_formula_transform_matches_the_tabulated_response(site: Path) -> None:
    # The same fit with the transformation written in the formula, I(100 * np.log10(pres)):
    # unrounded lpres moves the book's coefficients only by the tabulation's rounding
    # (intercept −42.164, slope 0.8956; numpy on the unrounded values, the independent check).
    body = report(site, "forbes-pres")
    data = pd.read_csv(TEXTBOOK / "forbes_boiling_point.csv")
    X = np.column_stack([np.ones(len(data)), data["bp"].to_numpy(dtype=float)])
    beta, *_ = np.linalg.lstsq(X, 100 * np.log10(data["pres"].to_numpy(dtype=float)), rcond=None)
    assert coef(body, "Intercept")["estimate"] == pytest.approx(beta[0], rel=1e-10)
    assert coef(body, "bp")["estimate"] == pytest.approx(beta[1], rel=1e-10)
    assert round(coef(body, "bp")["estimate"], 3) == 0.896
    assert round(body["residual_std_error"], 3) == 0.379
    assert body["response"] == "I(100 * np.log10(pres))"


# --- Miller & Miller, fluorescence calibration ------------------------------------------------------


def test_fluorescence_calibration_through_the_build(site: Path) -> None:
    # Source: Miller & Miller, Statistics and Chemometrics for Analytical Chemistry,
    # fluorescence example (from memory): b = 1.93, a = 1.52, s_y/x = 0.4329 (numpy:
    # 0.43285; the book's rounding is not known), r = 0.9989.
    body = report(site, "fluorescence")
    assert round(coef(body, "concentration")["estimate"], 2) == 1.93
    assert round(coef(body, "Intercept")["estimate"], 2) == 1.52
    assert body["residual_std_error"] == pytest.approx(0.4329, abs=1e-4)
    assert round(math.sqrt(body["r_squared"]), 4) == 0.9989
    # Book (from memory): y0 → x0 and its standard deviation s_x0.
    book = {2.9: (0.72, 0.26), 13.5: (6.21, 0.24), 23.0: (11.13, 0.26)}
    assert [c["response"] for c in body["calibration"]] == list(book)
    for c, (x0, s_x0) in zip(body["calibration"], book.values(), strict=True):
        assert round(c["estimate"], 2) == x0
        assert round(c["std_error"], 2) == s_x0
        assert c["ci_low"] < c["estimate"] < c["ci_high"]
