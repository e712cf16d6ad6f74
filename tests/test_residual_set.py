"""The residual section, the line as a whole and the variation table, checked against outside sources.

- Variation table (anova.csv): NIST StRD certified ANOVA of Norris (with intercept) and NoInt1
  (through the origin): regression and residual sums of squares, degrees of freedom, F and R².
- Influence limit on the pull chart: the median of F(p, n − p) from ``scipy.stats.f.ppf``.
- Shape-of-scatter bins: counts from ``numpy.histogram``; expected counts from ``scipy.stats.norm.cdf``.
- The page: each residual chart sits beside the checks it supports, with a caption and a link to
  the numbers behind it; none of the old four-panel set remains.
"""

from __future__ import annotations

import csv
import json
import math
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
import scipy.stats
from conftest import cli, write_toml

from sitegen.derive import spread_bins

NIST = Path(__file__).parent / "data" / "nist"
CERTIFIED = json.loads((NIST / "certified.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def nist_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("nist-variation")
    data = base / "data"
    data.mkdir()
    shutil.copy(NIST / "Norris.csv", data / "norris.csv")
    shutil.copy(NIST / "NoInt1.csv", data / "noint1.csv")
    write_toml(data / "norris.toml", {"model": "y ~ x"})
    write_toml(data / "noint1.toml", {"model": "y ~ x - 1"})
    site = base / "site"
    result = cli("build", data, "-o", site, "-j", "1")
    assert result.code == 0, result.output
    return site


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


@pytest.mark.parametrize(("slug", "name"), [("norris", "Norris"), ("noint1", "NoInt1")])
def test_variation_table_matches_nist_certified_anova(nist_site: Path, slug: str, name: str) -> None:
    cert = CERTIFIED[name]
    rows = _rows(nist_site / "datasets" / slug / "anova.csv")
    assert list(rows[0]) == ["part", "df", "sum_sq", "share_of_total", "mean_sq", "f_stat", "p_value"]
    assert [r["part"] for r in rows] == ["total", "x", "left_about_line"]
    total, term, left = rows
    ss_total = cert["ss_regression"] + cert["ss_residual"]
    assert float(total["sum_sq"]) == pytest.approx(ss_total, rel=1e-9)
    assert int(total["df"]) == cert["df_regression"] + cert["df_residual"]
    assert float(total["share_of_total"]) == 1.0
    assert float(term["sum_sq"]) == pytest.approx(cert["ss_regression"], rel=1e-9)
    assert float(term["share_of_total"]) == pytest.approx(cert["r_squared"], rel=1e-9)
    assert float(term["f_stat"]) == pytest.approx(cert["f_statistic"], rel=1e-8)
    assert float(left["sum_sq"]) == pytest.approx(cert["ss_residual"], rel=1e-8)
    assert float(left["mean_sq"]) == pytest.approx(cert["ms_residual"], rel=1e-8)
    assert int(left["df"]) == cert["df_residual"]
    assert left["f_stat"] == left["p_value"] == ""  # the scatter is not tested against itself


def test_variation_table_on_the_page_starts_from_the_total(nist_site: Path) -> None:
    html = (nist_site / "datasets" / "norris" / "index.html").read_text(encoding="utf-8")
    table = html[html.index('class="numbers variation"') :]
    table = table[: table.index("</table>")]
    heads = re.findall(r'<th scope="row">(.*?)</th>', table)
    assert heads == ["All the variation of y about its mean", "Taken up by x", "Left as scatter about the line"]
    assert ">Residual<" not in table
    noint = (nist_site / "datasets" / "noint1" / "index.html").read_text(encoding="utf-8")
    assert "All the variation of y about zero (the model has no intercept)" in noint


def test_the_line_as_a_whole_is_said_in_sentences(nist_site: Path) -> None:
    html = (nist_site / "datasets" / "norris" / "index.html").read_text(encoding="utf-8")
    whole = html[html.index('class="whole-line"') :]
    whole = whole[: whole.index("</div>")]
    assert "Scatter about the line:</strong> 0.8848" in whole  # NIST certified residual SD 0.884796…
    assert "from 36 rows less the 2 coefficients fitted" in whole
    assert "If it did not depend on x, a fit as close as this one would arise by chance" in whole
    # None of a familiar printout's closing phrases.
    for phrase in ("Residual standard error", "degrees of freedom\n", "Adjusted R", " on 1 and 34", "F-statistic"):
        assert phrase not in html


def test_pull_chart_limit_is_the_median_of_f(nist_site: Path) -> None:
    # Reference: scipy.stats.f.ppf(0.5, p, n − p); Norris has p = 2, n = 36.
    html = (nist_site / "datasets" / "norris" / "index.html").read_text(encoding="utf-8")
    spec = json.loads(re.search(r'data-target="vis-pull">(.*?)</script>', html, re.S).group(1))  # type: ignore[union-attr]
    (limit,) = spec["datasets"]["limit"]
    assert limit["value"] == pytest.approx(scipy.stats.f.ppf(0.5, 2, 34), rel=1e-5)
    assert "rows above it steer the line" in limit["label"]
    fit = json.loads((nist_site / "datasets" / "norris" / "fit.json").read_text(encoding="utf-8"))
    influence = next(d for d in fit["diagnostics"] if d["check"] == "influence")
    assert f"{limit['value']:.3g}" in influence["text"]  # the same limit the check states


def test_spread_bins_count_every_value_and_expect_a_bell() -> None:
    rng = np.random.default_rng(7)
    values = np.concatenate([rng.standard_normal(500), [7.5, -9.0, np.nan]])
    bins = spread_bins(values)
    lows = np.array([b[0] for b in bins])
    highs = np.array([b[1] for b in bins])
    counts = np.array([b[2] for b in bins])
    expected = np.array([b[3] for b in bins])
    finite = values[np.isfinite(values)]
    assert lows[0] == -6.0
    assert highs[-1] == 6.0
    np.testing.assert_allclose(highs - lows, 0.5)
    edges = np.append(lows, highs[-1])
    ref, _ = np.histogram(np.clip(finite, -6.0, 6.0), bins=edges)
    np.testing.assert_array_equal(counts, ref)
    assert counts.sum() == finite.size == pytest.approx(expected.sum())
    inner = scipy.stats.norm.cdf(highs[1:-1]) - scipy.stats.norm.cdf(lows[1:-1])
    np.testing.assert_allclose(expected[1:-1], finite.size * inner, rtol=1e-12)
    assert expected[0] == pytest.approx(finite.size * scipy.stats.norm.cdf(lows[1]), rel=1e-12)
    assert spread_bins(np.array([np.nan])) == ()
    small = spread_bins(np.array([0.1, -0.2, 0.3]))
    assert small[0][0] == -3.0
    assert small[-1][1] == 3.0


def test_each_residual_chart_sits_beside_its_checks(example_build: object) -> None:
    site = example_build.site  # type: ignore[attr-defined]
    html = (site / "datasets" / "calibration-nitrate-uv" / "index.html").read_text(encoding="utf-8")
    section = html[html.index('<section aria-labelledby="h-resid"') :]
    section = section[: section.index("</section>")]
    expected = {
        "across": ("brief-curvature", "brief-constant_variance", "vis-residual_by_x"),
        "order": ("brief-independence", "vis-residual_order"),
        "shape": ("brief-normality", "vis-shape"),  # one normality check (Shapiro–Wilk or Jarque–Bera decides)
        "pull": ("brief-influence", "vis-pull"),
    }
    for name, ids in expected.items():
        block = section[section.index(f'id="pair-{name}"') :]
        nxt = block.find('<div class="pair"', 10)
        block = block if nxt < 0 else block[:nxt]
        for ident in ids:
            assert f'id="{ident}"' in block, (name, ident)
        for caption in re.findall(r"<figcaption>(.*?)</figcaption>", block, re.S):
            assert 'href="observations.csv"' in caption, name
            assert len(re.sub(r"<.*?>", "", caption)) > 80, name
    for old in ("vis-qq", "vis-scale_location", "vis-leverage", "vis-residual_fitted", "Cook's distance contours"):
        assert old not in html


def test_residual_strip_is_twice_the_scatter(example_build: object) -> None:
    site = example_build.site  # type: ignore[attr-defined]
    page = site / "datasets" / "calibration-nitrate-uv"
    fit = json.loads((page / "fit.json").read_text(encoding="utf-8"))
    html = (page / "index.html").read_text(encoding="utf-8")
    spec = json.loads(re.search(r'data-target="vis-residual_by_x">(.*?)</script>', html, re.S).group(1))  # type: ignore[union-attr]
    (strip,) = spec["datasets"]["scatter"]
    s = fit["residual_std_error"]
    assert strip["high"] == pytest.approx(2 * s, rel=1e-5)
    assert strip["low"] == pytest.approx(-2 * s, rel=1e-5)
    assert math.isfinite(strip["high"])


def test_calibrations_add_residuals_in_percent_of_the_fitted_value(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    rows = "conc,signal\n0,0.011\n1,0.205\n2,0.398\n3,0.61\n4,0.797\n5,1.004\n1,0.199\n3,0.597\n"
    (data / "cal.csv").write_text(rows, encoding="utf-8")
    (data / "rel.csv").write_text(rows, encoding="utf-8")
    write_toml(data / "cal.toml", {"model": "signal ~ conc", "purpose": "calibration"})
    write_toml(data / "rel.toml", {"model": "signal ~ conc"})
    site = tmp_path / "site"
    result = cli("build", data, "-o", site, "-j", "1")
    assert result.code in (0, 3), result.output
    cal = (site / "datasets" / "cal" / "index.html").read_text(encoding="utf-8")
    rel = (site / "datasets" / "rel" / "index.html").read_text(encoding="utf-8")
    assert 'id="vis-residual_percent"' in cal
    assert 'id="vis-residual_percent"' not in rel
    block = cal[cal.index('id="fig-residual_percent"') :]
    block = block[: block.index("</figure>")]
    assert "column residual_percent" in block
    assert "conc = 0 have no percentage and are left out" in block
    spec = json.loads(re.search(r'data-target="vis-residual_percent">(.*?)</script>', cal, re.S).group(1))  # type: ignore[union-attr]
    drawing = [ly for ly in spec["layer"] if ly.get("data", {}).get("name") == "points"]
    assert drawing
    for layer in drawing:  # the percent is worked out in the chart from the residual and fitted value
        calc = [t for t in layer["transform"] if "calculate" in t and t["as"] == "percent"]
        assert calc == [{"calculate": "100 * datum.residual / datum.fitted", "as": "percent"}]


def test_crowded_charts_drop_the_sticks_but_keep_the_points() -> None:
    from sitegen.report import charts

    def rows(n: int) -> list[dict[str, object]]:
        return [
            {"row": i + 1, "x": float(i), "fitted": 1.0, "residual": 0.1, "cooks": 0.01, "kind": "ordinary"}
            for i in range(n)
        ]

    def marks(spec: dict[str, object]) -> list[tuple[str, str]]:
        layers = spec["layer"]
        assert isinstance(layers, list)
        return [(charts._mark_type(ly), ly.get("data", {}).get("name", "")) for ly in layers]

    few = charts.fill("pull", {"points": rows(10), "limit": [{"value": 0.7, "label": "limit"}]})
    many = charts.fill("pull", {"points": rows(charts.CROWDED + 1), "limit": [{"value": 0.7, "label": "limit"}]})
    assert ("rule", "points") in marks(few)
    assert ("rule", "points") not in marks(many)
    assert ("point", "points") in marks(many)
    assert ("rule", "limit") in marks(many)  # the limit line stays
