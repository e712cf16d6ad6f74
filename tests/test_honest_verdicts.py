"""The verdict reflects everything the page concludes: grouped lines, weighted fits, lack of fit, designed
end points, one normality check, checks that cannot apply, levels on every interval.

Independent sources beside each check:
* statsmodels WLS: the plain residuals of a weighted fit and their standard deviation in y units.
* NIST/SEMATECH e-Handbook 4.6.1.5 (Pontius load cell, tests/data/nist/): a design with every setting
  repeated, where the lack-of-fit test must still be judged (F = 214.7464 on 18 and 20 df).
* statsmodels OLSInfluence: the leverage values the end-point rule looks at.
"""

from __future__ import annotations

import csv
import shutil
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from conftest import build_exit_code, dataset_page, fit_json, write_csv, write_toml
from nist_data import load_nist


def _headline(page: str) -> str:
    return page.split('<p class="sentence">')[1].split("</p>", maxsplit=1)[0]


def _grouped_rows(slopes: tuple[float, float]) -> list[tuple[object, ...]]:
    rng = np.random.default_rng(7)
    rows: list[tuple[object, ...]] = [("site", "x", "y")]
    for name, slope in zip(("north", "south"), slopes, strict=True):
        for x in np.linspace(1, 10, 8):
            rows.append((name, f"{x:.2f}", f"{1 + slope * x + rng.normal(0, 0.3):.3f}"))
    return rows


def test_differing_group_slopes_lead_the_page_and_the_pooled_line_is_only_a_contrast(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "grouped.csv", _grouped_rows((2.0, 3.0)))
    write_toml(data / "grouped.toml", 'model = "y ~ x"\ngroup = "site"\ntags = ["probe"]\n')
    write_csv(data / "other.csv", _grouped_rows((2.0, 2.0)))
    write_toml(data / "other.toml", 'model = "y ~ x"\ngroup = "site"\ntags = ["probe"]\n')
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    fit = fit_json(site, "grouped")
    assert fit["pooled_contrast"] is True
    assert fit["status"] == "warn"
    assert "pooled line is not the recommended one" in fit["messages"][0]["text"]
    head = _headline(dataset_page(site, "grouped"))
    assert head.startswith("The slope of y on x differs between the groups of site")
    assert "north:" in head
    assert "south:" in head
    assert "only as a contrast" in head
    page = dataset_page(site, "grouped")
    assert "These checks are of the pooled line" in page
    assert "Flagged against the pooled line" in page
    index = (site / "index.html").read_text(encoding="utf-8")
    row = index.split('href="datasets/grouped/index.html"')[1].split("</tr>")[0]
    assert "one line per group" in row
    assert "the slopes differ" in row
    assert "pooled line is not the recommended one" in row  # the index note says why
    block = index.split('id="tag-probe"')[1].split("</div>\n  {% endfor")[0]
    assert "Left out: grouped" in block
    # the dataset whose groups share a slope is unaffected
    assert fit_json(site, "other")["pooled_contrast"] is False
    assert not _headline(dataset_page(site, "other")).startswith("The slope of")


def test_weighted_fit_states_the_scatter_in_y_units(tmp_path: Path) -> None:
    """statsmodels WLS: resid are the plain residuals y − fitted; their SD on n − p df is in y units."""
    rng = np.random.default_rng(3)
    x = np.linspace(1, 10, 12)
    y = 0.5 + 2 * x + rng.normal(0, 0.05 * x)
    w = 1 / (0.05 * x) ** 2
    data = tmp_path / "data"
    write_csv(data / "wls.csv", [("x", "y", "w"), *zip(x.round(3), y.round(4), w.round(4), strict=True)])
    write_toml(data / "wls.toml", 'model = "y ~ x"\nweights = "w"\nunits = { y = "mV", x = "mg/L" }\n')
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    table = np.loadtxt(data / "wls.csv", delimiter=",", skiprows=1)
    res = sm.WLS(table[:, 1], sm.add_constant(table[:, 0]), weights=table[:, 2]).fit()
    plain_sd = float(np.sqrt(np.sum(res.resid**2) / res.df_resid))
    fit = fit_json(site, "wls")
    assert fit["residual_sd_y"] == pytest.approx(plain_sd, rel=1e-9)
    assert fit["residual_std_error"] == pytest.approx(float(np.sqrt(res.scale)), rel=1e-9)
    page = dataset_page(site, "wls")
    head = _headline(page)
    assert "weighted least squares" in head
    assert "mV (the standard deviation of the plain residuals" in head
    assert "is not in y&#39;s units" in head or "is not in y's units" in head
    assert "Scatter about the line (plain residuals)" in page
    assert "Weighted least squares" in page
    assert "For this weighted fit these are the plain residuals, y − fitted, in y units" in page
    assert "Scatter about the line</dt>" not in page  # the weighted scale is never shown as the scatter


def test_lack_of_fit_needs_enough_repeated_settings(tmp_path: Path) -> None:
    data = tmp_path / "data"
    # one repeated setting only
    write_csv(data / "thin.csv", "x,y\n1,2.0\n1,2.2\n2,4.1\n3,5.8\n4,8.3\n5,9.9\n6,12.2\n")
    # the NIST/SEMATECH load-cell calibration: every setting twice
    shutil.copyfile(load_nist("Pontius").csv_path, data / "pontius.csv")
    write_toml(data / "pontius.toml", 'model = "y ~ x"\n')
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    thin = {d["check"]: d for d in fit_json(site, "thin")["diagnostics"]}["lack_of_fit"]
    assert thin["statistic"] is None
    assert thin["flag"] is False
    assert "Too few repeated measurements to judge: 1 setting measured more than once" in thin["text"]
    assert "not applicable" in dataset_page(site, "thin")
    pontius = {d["check"]: d for d in fit_json(site, "pontius")["diagnostics"]}["lack_of_fit"]
    assert pontius["statistic"] == pytest.approx(214.7464, rel=1e-5)


def test_designed_end_points_are_not_flagged_for_leverage_alone(tmp_path: Path) -> None:
    levels = [0.0, 0.0, 1.0, 1.0, 2.0, 2.0, 3.0, 3.0, 10.0, 10.0]
    resp = [0.01 + 0.2 * v + 0.002 * (-1) ** i for i, v in enumerate(levels)]  # duplicates straddle the line
    data = tmp_path / "data"
    write_csv(data / "cal.csv", [("conc", "signal"), *zip(levels, [f"{r:.5f}" for r in resp], strict=True)])
    single = [0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 10.0]
    write_csv(
        data / "lone.csv", [("conc", "signal"), *((v, f"{0.01 + 0.2 * v:.4f}") for v in single[:-1]), (10.0, "2.012")]
    )
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    lev = sm.OLS(np.array(resp), sm.add_constant(np.array(levels))).fit().get_influence().hat_matrix_diag
    assert all(h > 2 * 2 / len(levels) for h in lev[-2:])  # statsmodels: the top standards do pass 2p/n
    flagged = fit_json(site, "cal")["flagged"]
    assert all(f["reasons"] != ["leverage above 2p/n"] for f in flagged)
    assert not any(f["row"] in (9, 10) for f in flagged)
    # an unreplicated far point is still marked
    lone = fit_json(site, "lone")["flagged"]
    assert any(f["row"] == len(single) and "leverage above 2p/n" in f["reasons"] for f in lone)


def _obs_flags(site: Path, slug: str) -> list[str]:
    with (site / "datasets" / slug / "observations.csv").open(encoding="utf-8", newline="") as f:
        return [row["flags"] for row in csv.DictReader(f)]


def test_unreplicated_calibration_end_points_are_not_flagged_for_leverage_alone(tmp_path: Path) -> None:
    """A calibration's standards are set values even when each is measured once: leverage alone marks none
    of them; leverage with a large residual does. statsmodels OLSInfluence gives the leverage and the
    studentized residual the rule looks at (an independent computation)."""
    single = [0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 10.0]
    resp = [0.01 + 0.2 * v + 0.002 * (-1) ** i for i, v in enumerate(single)]
    off = [*resp[:-1], 2.4]  # the top standard reads high: a large residual at a high-leverage point
    data = tmp_path / "data"
    for name, ys, purpose in (("cal", resp, "calibration"), ("bad", off, "calibration"), ("rel", resp, None)):
        write_csv(data / f"{name}.csv", [("conc", "signal"), *zip(single, [f"{r:.4f}" for r in ys], strict=True)])
        if purpose:
            write_toml(data / f"{name}.toml", f'purpose = "{purpose}"\n')
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    X = sm.add_constant(np.array(single))
    infl = sm.OLS(np.round(np.array(resp), 4), X).fit().get_influence()
    assert infl.hat_matrix_diag[-1] > 2 * 2 / len(single)  # the top standard passes 2p/n (statsmodels)
    assert fit_json(site, "cal")["flagged"] == []
    assert set(_obs_flags(site, "cal")) == {""}  # the download lists no reason the page does not flag
    # a relation with the same numbers: x are not declared set values, so the far point is marked
    rel = fit_json(site, "rel")["flagged"]
    assert [f["row"] for f in rel] == [len(single)]
    assert "leverage above 2p/n" in rel[0]["reasons"]
    # leverage combined with a large residual still marks the end point
    bad_infl = sm.OLS(np.round(np.array(off), 4), X).fit().get_influence()
    assert abs(bad_infl.resid_studentized_external[-1]) > 3  # statsmodels: past the residual cut-off
    bad = fit_json(site, "bad")["flagged"]
    assert [f["row"] for f in bad] == [len(single)]
    assert "|studentized residual| above 3" in bad[0]["reasons"]
    assert bad[0]["studentized_residual"] == pytest.approx(bad_infl.resid_studentized_external[-1], rel=1e-9)
    assert _obs_flags(site, "bad")[-1].startswith("leverage above 2p/n; |studentized residual| above 3")
    assert "every standard of a calibration" in dataset_page(site, "bad")


def test_differing_group_slopes_flag_rows_against_each_groups_own_line(tmp_path: Path) -> None:
    """statsmodels OLSInfluence on the separate-lines design (a level and a slope per group) gives the
    leverage, studentized residual, Cook's distance and DFFITS the per-group flags are judged on."""
    rows = _grouped_rows((2.0, 3.0))
    rows[5] = (rows[5][0], rows[5][1], f"{float(str(rows[5][2])) + 2.5:.3f}")  # one north reading far off
    data = tmp_path / "data"
    write_csv(data / "grouped.csv", rows)
    write_toml(data / "grouped.toml", 'model = "y ~ x"\ngroup = "site"\n')
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    fit = fit_json(site, "grouped")
    assert fit["pooled_contrast"] is True
    g = np.array([r[0] for r in rows[1:]])
    x = np.array([float(str(r[1])) for r in rows[1:]])
    y = np.array([float(str(r[2])) for r in rows[1:]])
    dummies = np.column_stack([(g == name).astype(float) for name in ("north", "south")])
    design = np.column_stack([dummies, dummies * x[:, None]])
    infl = sm.OLS(y, design).fit().get_influence()
    h, t = infl.hat_matrix_diag, infl.resid_studentized_external
    d, f = infl.cooks_distance[0], infl.dffits[0]
    n, p = len(y), 4
    expected = [
        i + 1 for i in range(n) if h[i] > 2 * p / n or abs(t[i]) > 3 or d[i] > 4 / n or abs(f[i]) > 2 * np.sqrt(p / n)
    ]
    got = fit["group_flagged"]
    assert [r["row"] for r in got] == expected
    assert 5 in expected  # the reading moved off its group's line
    assert fit["group_flagged_total"] == len(expected)
    for r in got:
        i = r["row"] - 1
        assert r["leverage"] == pytest.approx(h[i], rel=1e-9)
        assert r["studentized_residual"] == pytest.approx(t[i], rel=1e-9)
        assert r["cooks_distance"] == pytest.approx(d[i], rel=1e-9)
        assert r["dffits"] == pytest.approx(f[i], rel=1e-9)
    page = dataset_page(site, "grouped")
    assert "Against each site&#39;s own line (the recommended model)" in page or (
        "Against each site's own line (the recommended model)" in page
    )
    assert "Against the pooled line (a contrast only)" in page


def test_normality_is_one_check_and_inapplicable_checks_say_so(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n6,11.8\n7,14.2\n")
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    checks = {d["check"]: d for d in fit_json(site, "a")["diagnostics"]}
    assert "normality" in checks
    assert "normality_shapiro" not in checks
    assert "normality_jarque_bera" not in checks
    assert "Shapiro–Wilk decides" in checks["normality"]["text"]
    assert "For reference only, not a second verdict: Jarque–Bera" in checks["normality"]["text"]
    page = dataset_page(site, "a")
    collinear = page.split("Overlapping predictors")[1].split("</h3>")[0]
    assert "not applicable" in collinear
    assert "no concern" not in collinear


def test_one_dataset_tags_get_no_chart_and_intervals_state_their_level(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n6,11.8\n")
    write_toml(data / "a.toml", 'tags = ["alone", "pair"]\nlevel = 0.9\n')
    write_csv(data / "b.csv", "x,y\n1,2.0\n2,4.2\n3,6.1\n4,7.7\n5,10.3\n6,12.0\n")
    write_toml(data / "b.toml", 'tags = ["pair"]\nlevel = 0.9\n')
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    index = (site / "index.html").read_text(encoding="utf-8")
    alone = index.split('id="tag-alone"')[1].split('class="tag-block"')[0]
    assert "vl-spec" not in alone
    assert "Only one dataset carries this tag" in alone
    pair = index.split('id="tag-pair"')[1]
    assert "vl-spec" in pair
    assert "90% interval" in pair
    assert "standard error" in pair.split('class="tag-test"')[1].split("</p>")[0]
    header = index.split('id="datasets"')[1].split("</thead>")[0]
    assert "90% interval" in header
    with (site / "summary.csv").open(encoding="utf-8", newline="") as f:
        assert {row["level"] for row in csv.DictReader(f)} == {"0.9"}
