"""Provenance on every page, rows left out with their reasons, the workbook's metadata sheet, and the change
report's order (verdicts that got worse first)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from conftest import build_exit_code, cli, fit_json, write_csv, write_toml
from openpyxl import load_workbook

CSV = "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n6,11.8\n7,30.0\n8,16.1\n"


def test_rows_left_out_with_reasons_leave_the_csv_alone(tmp_path: Path) -> None:
    """statsmodels OLS on the remaining rows is the reference for the refitted slope."""
    data = tmp_path / "data"
    write_csv(data / "a.csv", CSV)
    before = (data / "a.csv").read_bytes()
    write_toml(
        data / "a.toml",
        'leave_out = [{ row = 7, reason = "cuvette cracked" }, { row = 12, reason = "no such row" }]\n'
        'analyst = "R. Okafor"\nreviewer = "J. Lindqvist"\nmethod_reference = "SOP W-12 rev 3"\n',
    )
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    assert (data / "a.csv").read_bytes() == before
    fit = fit_json(site, "a")
    assert fit["excluded_rows"] == [[7, "cuvette cracked"]]
    assert fit["n"] == 7
    assert fit["n_rows"] == 8
    table = np.loadtxt(data / "a.csv", delimiter=",", skiprows=1)
    keep = np.arange(1, 9) != 7
    ref = sm.OLS(table[keep, 1], sm.add_constant(table[keep, 0])).fit()
    slope = next(c for c in fit["coefficients"] if c["term"] == "x")
    assert slope["estimate"] == pytest.approx(ref.params[1], rel=1e-10)
    texts = " ".join(m["text"] for m in fit["messages"])
    assert "leave_out names row(s) 12" in texts
    page = (site / "datasets" / "a" / "index.html").read_text(encoding="utf-8")
    assert "Rows left out on purpose" in page
    assert "cuvette cracked" in page
    rows = [
        int(line.split(",")[0]) for line in (site / "datasets" / "a" / "observations.csv").read_text().splitlines()[1:]
    ]
    assert 7 not in rows
    # who answers for it: on the page and in the workbook's metadata sheet
    assert "R. Okafor" in page
    assert "J. Lindqvist" in page
    assert "SOP W-12 rev 3" in page
    wb = load_workbook(site / "datasets" / "a" / "tables.xlsx", read_only=True)
    about = {row[0]: row[1] for row in wb["about"].iter_rows(min_row=2, values_only=True)}
    wb.close()
    assert about["analyst"] == "R. Okafor"
    assert about["method reference"] == "SOP W-12 rev 3"
    assert about["row 7 left out"] == "cuvette cracked"
    assert about["input SHA-256"] == fit["input_sha256"]
    assert about["confidence level of every interval (ci_*, mean_ci_*, pred_*)"] == 0.95


@pytest.mark.parametrize(
    ("value", "words"),
    [
        ("[{ row = 7 }]", "exactly 'row' and 'reason'"),
        ('[{ row = 0, reason = "x" }]', "CSV data row number from 1"),
        ('[{ row = 3, reason = " " }]', "needs its reason"),
        ('[{ row = 3, reason = "a" }, { row = 3, reason = "b" }]', "listed twice"),
    ],
)
def test_bad_leave_out_is_named(tmp_path: Path, value: str, words: str) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", CSV)
    write_toml(data / "a.toml", f"leave_out = {value}\n")
    result = cli("build", data, "-o", tmp_path / "site", "-j", "1")
    assert result.code == 1
    assert words in result.output
    assert "a.toml" in result.output


def test_every_page_shows_build_time_and_input_hash(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", CSV)
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    built = json.loads((site / "build.json").read_text(encoding="utf-8"))["built_at"]
    script = (site / "assets" / "built.js").read_text(encoding="utf-8")
    assert json.dumps(built) in script
    page = (site / "datasets" / "a" / "index.html").read_text(encoding="utf-8")
    sha = fit_json(site, "a")["input_sha256"]
    assert f">{sha[:12]}</code>" in page
    assert "data-built-at" in page
    assert 'src="../../assets/built.js"' in page
    assert built not in page  # pages stay byte-identical between builds; the time is in built.js


def test_change_report_puts_worsened_verdicts_first(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", "x,y\n1,2.0\n2,4.0\n3,6.1\n4,8.0\n5,10.0\n6,12.1\n")
    write_toml(data / "a.toml", "[requirements]\nmin_r_squared = 0.99\n")
    write_csv(data / "b.csv", "x,y\n1,2.0\n2,4.0\n3,6.1\n4,8.0\n5,10.0\n6,12.1\n")
    write_toml(data / "b.toml", "[requirements]\nmin_r_squared = 0.99999\n")
    write_csv(data / "c.csv", "x,y\n1,2.0\n2,4.0\n3,6.1\n4,8.0\n5,10.0\n6,12.1\n")
    site = tmp_path / "site"
    assert build_exit_code(data, site) == 0
    # a: requirement now unmet; b: now met; c: data changed, verdicts the same
    write_toml(data / "a.toml", "[requirements]\nmin_r_squared = 0.99999\n")
    write_toml(data / "b.toml", "[requirements]\nmin_r_squared = 0.99\n")
    write_csv(data / "c.csv", "x,y\n1,2.0\n2,4.1\n3,6.1\n4,8.0\n5,10.0\n6,12.1\n")
    assert build_exit_code(data, site) == 0
    change = json.loads((site / "changes.json").read_text(encoding="utf-8"))
    verdicts = change["verdicts"]
    found = {v["dataset"]: (v["requirements_before"], v["requirements"], v["worse"]) for v in verdicts}
    assert found["a"] == ("met", "unmet", True)
    assert found["b"] == ("unmet", "met", False)
    worse = [v["worse"] for v in verdicts]
    assert worse == sorted(worse, reverse=True)  # every worsening before every improvement
    html = (site / "changes.html").read_text(encoding="utf-8")
    assert html.index("Verdicts that changed") < html.index("Fitted again")


def test_leave_out_holds_when_the_fit_is_made_again_in_double_double(tmp_path: Path) -> None:
    """A badly conditioned cubic (scaled condition above 1e6) is fitted again in double-double; the rows left out
    are those of the file as read, so none is reported missing and the excluded row is listed."""
    data = tmp_path / "data"
    xs = [300 + 0.5 * i for i in range(21)]
    rows = "".join(f"{x},{1 + 0.2 * x + 0.01 * x**2 + 0.001 * x**3 + (-1) ** i * 0.01}\n" for i, x in enumerate(xs))
    write_csv(data / "a.csv", "x,y\n" + rows)
    write_toml(
        data / "a.toml",
        'model = "y ~ x + I(x**2) + I(x**3)"\nleave_out = [{ row = 3, reason = "bubble in the cell" }]\n',
    )
    site = tmp_path / "site"
    build_exit_code(data, site)
    fit = fit_json(site, "a")
    assert fit["excluded_rows"] == [[3, "bubble in the cell"]]
    assert fit["n"] == 20
    assert fit["n_rows"] == 21
    assert not any("leave_out names" in m["text"] for m in fit["messages"])
