"""Regression tests for defects a code review found (each reproduced before it was fixed).

Independent sources: statsmodels (WLS and nested-model F tests), the contract in
DESIGN.md (byte-identical rebuilds), and plain arithmetic for the wording checks.
"""

from __future__ import annotations

import json
import shutil
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import cli, fit_json

from sitegen.report import fmt

DATA = Path(__file__).parent / "data" / "review"


def _build(tmp_path: Path, files: dict[str, str], *extra: str) -> Path:
    data = tmp_path / "data"
    data.mkdir(exist_ok=True)
    for name, text in files.items():
        (data / name).write_text(text, encoding="utf-8")
    out = tmp_path / "site"
    res = cli("build", data, "-o", out, "-j", "1", *extra)
    assert res.code in (0, 1), res.output
    return out


def test_group_comparison_uses_the_weights(tmp_path: Path) -> None:
    """With weights, the equal-slopes test is the weighted nested-model F test (statsmodels WLS + anova_lm)."""
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm

    text = (DATA / "weighted_groups.csv").read_text(encoding="utf-8")
    site = _build(tmp_path, {"wg.csv": text, "wg.toml": 'model = "y ~ x"\nweights = "w"\ngroup = "g"\n'})
    got = fit_json(site, "wg")["groups"]
    df = pd.read_csv(DATA / "weighted_groups.csv")
    reduced = smf.wls("y ~ C(g) + x", df, weights=df["w"]).fit()
    full = smf.wls("y ~ C(g) * x", df, weights=df["w"]).fit()
    table = anova_lm(reduced, full)
    assert got["f_stat"] == pytest.approx(float(table["F"].iloc[1]), rel=1e-9)
    assert got["p_value"] == pytest.approx(float(table["Pr(>F)"].iloc[1]), rel=1e-7)
    for line in got["lines"]:
        part = df[df["g"] == line["group"]]
        ref = smf.wls("y ~ x", part, weights=part["w"]).fit()
        assert line["slope"] == pytest.approx(float(ref.params["x"]), rel=1e-9)


def test_alternative_lines_are_not_drawn_for_a_weighted_fit(tmp_path: Path) -> None:
    text = (DATA / "weighted_groups.csv").read_text(encoding="utf-8")
    site = _build(tmp_path, {"w.csv": text, "w.toml": 'model = "y ~ x"\nweights = "w"\nlines = ["deming"]\n'})
    fit = fit_json(site, "w")
    assert fit["lines"] == []
    assert any("do not take weights" in m["text"] for m in fit["messages"])


def test_calibration_is_refused_for_a_transformed_response(tmp_path: Path) -> None:
    rows = "\n".join(f"{x},{np.exp(0.5 + 0.2 * x) * (1 + 0.01 * ((x * 7) % 3 - 1)):.5f}" for x in range(1, 16))
    site = _build(
        tmp_path, {"logy.csv": "x,y\n" + rows + "\n", "logy.toml": 'model = "np.log(y) ~ x"\ncalibrate = [2.0]\n'}
    )
    fit = fit_json(site, "logy")
    assert fit["calibration"] == []
    assert fit["limits"] is None
    assert any("untransformed response" in m["text"] for m in fit["messages"])


def _sentence(site: Path, slug: str) -> str:
    page = (site / "datasets" / slug / "index.html").read_text(encoding="utf-8")
    start = page.index('<p class="sentence">')
    return page[start : page.index("</p>", start)]


def test_the_summary_sentence_only_reads_a_slope_as_a_rate_for_a_straight_line(tmp_path: Path) -> None:
    quad = "\n".join(f"{x / 2},{4 * (x / 2) - 0.9 * (x / 2) ** 2 + 0.1 * ((x * 5) % 3 - 1):.4f}" for x in range(21))
    flat = "\n".join(f"{x},{5 + 0.01 * ((x * 7) % 5 - 2):.4f}" for x in range(1, 13))
    noint = "\n".join(f"{x},{50 + 0.1 * x + 0.2 * ((x * 3) % 4 - 1.5):.4f}" for x in range(1, 13))
    site = _build(
        tmp_path,
        {
            "quad.csv": "x,y\n" + quad + "\n",
            "quad.toml": 'model = "y ~ x + I(x**2)"\n',
            "flat.csv": "x,y\n" + flat + "\n",
            "noint.csv": "x,y\n" + noint + "\n",
            "noint.toml": 'model = "y ~ x - 1"\n',
        },
    )
    quad_text = _sentence(site, "quad")
    assert "rises by" not in quad_text
    assert "falls by" not in quad_text
    assert "fitted with y ~ x + I(x**2)" in quad_text
    fit = fit_json(site, "flat")
    slope = next(c for c in fit["coefficients"] if c["term"] == "x")
    assert slope["ci_low"] < 0 < slope["ci_high"]  # the data do not establish a direction
    assert "do not establish whether y rises or falls" in _sentence(site, "flat")
    noint_text = _sentence(site, "noint")
    assert "measured about zero" in noint_text
    assert "of the variation" not in noint_text


def test_p_values_and_percentages_keep_the_digits_that_matter() -> None:
    assert fmt.pvalue(0.0496) == "0.0496"
    assert fmt.pvalue(0.0504) == "0.0504"
    assert fmt.pvalue(0.43) == "0.430"
    assert fmt.p_phrase(3e-7) == "p < 0.0001"
    assert fmt.percent(0.999734) == "99.97%"
    assert fmt.percent(0.999554) == "99.96%"
    assert fmt.percent(1.0) == "100.0%"


def test_turning_static_images_off_removes_them_on_the_next_build(tmp_path: Path) -> None:
    line = "x,y\n" + "\n".join(f"{x},{2 * x + 0.1 * ((x * 3) % 5 - 2):.3f}" for x in range(1, 12)) + "\n"
    data = tmp_path / "data"
    data.mkdir()
    (data / "a.csv").write_text(line, encoding="utf-8")
    (data / "site.toml").write_text("static_images = true\n", encoding="utf-8")
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    assert list((out / "datasets" / "a").glob("chart-*.svg"))
    (data / "site.toml").write_text("static_images = false\n", encoding="utf-8")
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    assert list((out / "datasets" / "a").glob("chart-*.svg")) == []
    fresh = tmp_path / "fresh"
    assert cli("build", data, "-o", fresh, "-j", "1").code == 0
    names = {p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file()}
    assert names == {p.relative_to(fresh).as_posix() for p in fresh.rglob("*") if p.is_file()}


def test_predictions_outside_the_model_are_left_out_with_a_warning(tmp_path: Path) -> None:
    rows = "\n".join(f"{x},{2.0 * x**0.7 * (1 + 0.01 * ((x * 7) % 3 - 1)):.5f}" for x in range(1, 15))
    files = {
        "ll.csv": "x,y\n" + rows + "\n",
        "ll.toml": 'model = "np.log(y) ~ np.log(x)"\npredict_at = [0, -1, 2]\n',
    }
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        site = _build(tmp_path, files)
    fit = fit_json(site, "ll")
    assert [dict(map(tuple, q["at"]))["x"] for q in fit["predictions"]] == [2.0]
    assert sum("outside the model's reach" in m["text"] for m in fit["messages"]) == 2


def test_reused_example_copy_is_still_identical(tmp_path: Path) -> None:
    """The fixes above must not disturb determinism: a copy built twice matches a fresh build."""
    from conftest import EXAMPLE

    data = tmp_path / "data"
    shutil.copytree(EXAMPLE / "field", data / "field")
    a, b = tmp_path / "a", tmp_path / "b"
    assert cli("build", data, "-o", a, "-j", "1").code in (0, 1)
    assert cli("build", data, "-o", a, "-j", "1").code in (0, 1)
    assert cli("build", data, "-o", b, "-j", "1").code in (0, 1)
    for p in sorted(a.rglob("*")):
        if p.is_file() and p.name not in ("build.json", "built.js"):  # both carry the build time
            assert p.read_bytes() == (b / p.relative_to(a)).read_bytes(), p


def test_anscombe_quartet_is_told_apart_by_the_verdicts(tmp_path: Path) -> None:
    """F. J. Anscombe (1973), 'Graphs in Statistical Analysis': four sets with the same line and R².

    Through the whole build: set I is sound; II is flagged for curvature, III for its outlier
    (studentized residual), IV because one point alone sets the slope (leverage 1).
    """
    df = pd.read_csv(Path(__file__).parent / "data" / "textbook" / "anscombe_quartet.csv")
    files = {}
    for k in (1, 2, 3, 4):
        part = df[[f"x{k}", f"y{k}"]].rename(columns={f"x{k}": "x", f"y{k}": "y"})
        files[f"set{k}.csv"] = part.to_csv(index=False)
    site = _build(tmp_path, files)
    fits = {k: fit_json(site, f"set{k}") for k in (1, 2, 3, 4)}
    for fit in fits.values():  # the same line for all four (published: 3.00 + 0.500 x, R² 0.67)
        coef = {c["term"]: c["estimate"] for c in fit["coefficients"]}
        assert coef["Intercept"] == pytest.approx(3.00, abs=0.005)
        assert coef["x"] == pytest.approx(0.500, abs=0.001)
        assert fit["r_squared"] == pytest.approx(0.67, abs=0.005)
    flagged = {k: {d["check"] for d in fit["diagnostics"] if d["flag"]} for k, fit in fits.items()}
    assert fits[1]["status"] == "ok", flagged[1]
    assert "curvature" in flagged[2]
    assert "influence" in flagged[3]
    assert "influence" in flagged[4]
    influence4 = next(d for d in fits[4]["diagnostics"] if d["check"] == "influence")
    assert influence4["rows"] == [8]  # the CSV row of the point at x = 19
    assert all(fits[k]["status"] == "warn" for k in (2, 3, 4))


def test_a_partial_rebuild_equals_a_fresh_build(tmp_path: Path) -> None:
    """After one dataset changes, the rebuilt site (others reused) equals a fresh build of the same input."""
    from conftest import EXAMPLE

    data = tmp_path / "data"
    shutil.copytree(EXAMPLE, data)
    site, fresh = tmp_path / "site", tmp_path / "fresh"
    assert cli("build", data, "-o", site).code in (0, 1)
    target = data / "calibration" / "nitrate_uv.csv"
    target.write_text(target.read_text(encoding="utf-8") + "6,1.1702\n", encoding="utf-8")
    assert cli("build", data, "-o", site).code in (0, 1)
    meta = json.loads((site / "build.json").read_text(encoding="utf-8"))
    assert sorted(e["dataset"] for e in meta["datasets"] if not e["reused"]) == ["calibration-nitrate-uv"]
    assert cli("build", data, "-o", fresh).code in (0, 1)
    skip = {"build.json", "assets/built.js", "changes.html", "changes.json", "history.json"}  # the rebuild itself
    for p in sorted(fresh.rglob("*")):
        rel = p.relative_to(fresh).as_posix()
        if p.is_file() and rel not in skip:
            assert (site / rel).read_bytes() == p.read_bytes(), rel


def test_a_sidecar_nested_too_deeply_fails_its_dataset_only(tmp_path: Path) -> None:
    """Python's TOML reader gives up on deep nesting with a RecursionError; the other datasets are built."""
    data = tmp_path / "data"
    data.mkdir()
    for name in ("a", "b", "c"):
        (data / f"{name}.csv").write_text("x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n", encoding="utf-8")
    (data / "b.toml").write_text('title = "B"\nz = ' + "[" * 5000 + "]" * 5000 + "\n", encoding="utf-8")
    result = cli("build", data, "-o", tmp_path / "site")
    assert result.code == 1, result.output
    assert (tmp_path / "site" / "datasets" / "a" / "index.html").is_file()
    assert (tmp_path / "site" / "datasets" / "c" / "index.html").is_file()
    assert "Traceback" not in result.output


def test_predict_at_entries_without_the_same_keys_are_refused_with_a_reason(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    (data / "p.csv").write_text("a,b,y\n1,2,3.1\n2,1,3.9\n3,5,8.2\n4,3,7.1\n5,4,9.0\n", encoding="utf-8")
    (data / "p.toml").write_text('model = "y ~ a + b"\npredict_at = [{ a = 1, b = 2 }, { a = 3 }]\n', encoding="utf-8")
    result = cli("build", data, "-o", tmp_path / "site")
    assert result.code == 0, result.output
    fit = json.loads((tmp_path / "site" / "datasets" / "p" / "fit.json").read_text(encoding="utf-8"))
    assert fit["predictions"] == []
    texts = [m["text"] for m in fit["messages"]]
    assert any("entry 2 has no value for 'b'" in t for t in texts), texts
