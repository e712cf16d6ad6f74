"""The built site against the interface contract (DESIGN.md, "Output layout" and "Input format").

Two builds serve every test here: the example project (built once per session in
conftest) and a small module-wide data folder made to probe edge cases (slug
collisions, sub-folders, hidden files, an assumed model, a quadratic term, a
model whose F statistic is undefined, gaps in the data, a title a spreadsheet
would execute). Independent checks use hashlib (input digests) and numpy's
least squares (estimates of the small datasets).
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import re
import shutil
import zipfile
from dataclasses import dataclass, field
from datetime import datetime
from html.parser import HTMLParser
from pathlib import Path, PurePosixPath
from typing import Any
from urllib.parse import unquote, urlsplit

import numpy as np
import pytest
from conftest import (
    COEFFICIENT_COLUMNS,
    DIAGNOSTIC_COLUMNS,
    FIT_JSON_KEYS,
    LINE_CSV,
    OBSERVATION_COLUMNS,
    ROOT,
    SUMMARY_COLUMNS,
    Built,
    cli,
    copy_example,
    site_bytes,
    write_csv,
    write_toml,
)

from sitegen import __version__

STATUSES = {"ok", "warn", "error"}
MESSAGE_LEVELS = {"error", "warning", "note"}


# ---------------------------------------------------------------- helpers


def read_csv(path: Path) -> tuple[list[str], list[dict[str, str]]]:
    with path.open(newline="", encoding="utf-8") as f:
        reader = csv.DictReader(f)
        rows = list(reader)
        return list(reader.fieldnames or []), rows


def strict_json(path: Path) -> Any:
    """Parse JSON that must not contain NaN or Infinity tokens."""

    def refuse(token: str) -> Any:
        raise AssertionError(f"{path}: non-standard JSON constant {token}")

    return json.loads(path.read_text(encoding="utf-8"), parse_constant=refuse)


def cell_of(value: Any) -> str:
    """How the contract writes a number in CSV: shortest round-trip repr, NaN/inf/None as empty."""
    if value is None:
        return ""
    if isinstance(value, bool):
        raise AssertionError("booleans are not expected here")
    if isinstance(value, int):
        return str(value)
    assert isinstance(value, float)
    return repr(value) if math.isfinite(value) else ""


def contract_slug(relpath: str) -> str:
    """The contract's slug rule written out again, independently of sitegen.discover."""
    stem = relpath[: -len(".csv")]
    return re.sub(r"[^a-z0-9]+", "-", stem.lower()).strip("-")


def contract_slugs(relpaths: list[str]) -> dict[str, str]:
    out: dict[str, str] = {}
    for rel in sorted(relpaths):
        base = slug = contract_slug(rel)
        k = 1
        while slug in out.values():
            k += 1
            slug = f"{base}-{k}"
        out[rel] = slug
    return out


def dataset_dirs(site: Path) -> list[str]:
    return sorted(p.name for p in (site / "datasets").iterdir() if p.is_dir())


def fit_json(site: Path, slug: str) -> dict[str, Any]:
    body = strict_json(site / "datasets" / slug / "fit.json")
    assert isinstance(body, dict)
    return body


def text_files(site: Path) -> dict[str, str]:
    """Every text file of a site (and every member of every XLSX workbook) as text."""
    out: dict[str, str] = {}
    for path in sorted(site.rglob("*")):
        if not path.is_file():
            continue
        rel = path.relative_to(site).as_posix()
        if path.suffix == ".xlsx":
            with zipfile.ZipFile(path) as zf:
                for name in zf.namelist():
                    out[f"{rel}!{name}"] = zf.read(name).decode("utf-8", errors="replace")
        else:
            out[rel] = path.read_bytes().decode("utf-8", errors="replace")
    return out


@dataclass
class PageScan(HTMLParser):
    """Links, loads and anchors of one HTML page."""

    refs: list[tuple[str, str, str]] = field(default_factory=list)  # (tag, attribute, value)
    ids: set[str] = field(default_factory=set)
    styles: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self._in_style = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        for name, value in attrs:
            if value is None:
                continue
            if name in ("id", "name"):
                self.ids.add(value)
            if name in ("src", "href", "srcset", "poster", "data", "action", "formaction", "xlink:href"):
                self.refs.append((tag, name, value))
            if name == "style":
                self.styles.append(value)
        self._in_style = tag == "style"

    def handle_endtag(self, tag: str) -> None:
        self._in_style = False

    def handle_data(self, data: str) -> None:
        if self._in_style:
            self.styles.append(data)


def scan(path: Path) -> PageScan:
    p = PageScan()
    p.feed(path.read_text(encoding="utf-8"))
    p.close()
    return p


def html_pages(site: Path) -> list[Path]:
    return sorted(site.rglob("*.html"))


# ---------------------------------------------------------------- a module-wide build of edge cases

QUAD_CSV = "x,y\n0,1.02\n1,1.49\n2,3.05\n3,5.51\n4,8.93\n5,13.6\n6,19.4\n7,26.1\n"
PAIR_CSV = "first,second\n1.0,3.1\n2.0,4.8\n3.0,7.2\n4.0,8.9\n5.0,11.1\n6.0,12.8\n"
# Data rows 2 (blank line) and 4 (missing y) cannot be used; the rest keep their row numbers.
GAPS_CSV = "x,y\n1,2.1\n\n2,3.9\n3,\n4,7.8\n5,10.1\n6,12.0\n"

EDGE_FILES = {
    "a b.csv": "a-b",
    "a-b.csv": "a-b-2",
    "a/b.csv": "a-b-3",  # '/' sorts after '-' and before '_'
    "a_b.csv": "a-b-4",
    "Sub Folder/Deep/My File (v2).csv": "sub-folder-deep-my-file-v2",
    "--Edge--.csv": "edge",
    "quad.csv": "quad",
    "pair.csv": "pair",
    "const.csv": "const",
    "gaps.csv": "gaps",
    "evil.csv": "evil",
    "typo.csv": "typo",
    "_draft.csv": "draft",
    "_old/y.csv": "old-y",
    "skip_root.csv": "skip-root",  # 'a/skip_*' names a path: only a/skip_… is skipped
}
HIDDEN_FILES = (
    ".hidden.csv",
    ".git/x.csv",
    "a/.z.csv",
    ".old/deeper/visible.csv",
)
# Skipped by the edge site's ignore list (EDGE_IGNORE); names starting with '_' are ordinary.
EDGE_IGNORE = ["scratch", "*.old.csv", "a/skip_*"]
IGNORED_FILES = (
    "scratch/x.csv",
    "a/scratch/y.csv",
    "notes.old.csv",
    "a/deeper/notes.old.csv",
    "a/skip_w.csv",
)


@pytest.fixture(scope="module")
def edge_build(tmp_path_factory: pytest.TempPathFactory) -> Built:
    base = tmp_path_factory.mktemp("edge")
    data = base / "data"
    for rel in EDGE_FILES:
        write_csv(data / rel, LINE_CSV)
    for rel in HIDDEN_FILES + IGNORED_FILES:
        write_csv(data / rel, LINE_CSV)
    write_toml(data / "site.toml", {"ignore": EDGE_IGNORE})
    write_csv(data / "quad.csv", QUAD_CSV)
    write_toml(data / "quad.toml", {"title": "Quadratic", "model": "y ~ x + I(x**2)"})
    write_csv(data / "pair.csv", PAIR_CSV)
    write_toml(data / "const.toml", {"model": "y ~ 1"})  # no slope: the F test is undefined
    write_csv(data / "gaps.csv", GAPS_CSV)
    write_toml(data / "gaps.toml", {"model": "y ~ x"})
    write_toml(data / "evil.toml", {"title": "=1+2", "model": "y ~ x", "tags": ["@risk", "plain"]})
    write_toml(data / "typo.toml", {"model": "y ~ x", "levle": 0.9})
    for rel in EDGE_FILES:
        sidecar = (data / rel).with_suffix(".toml")
        if not sidecar.exists() and rel != "pair.csv":
            write_toml(sidecar, {"model": "y ~ x"})
    site = base / "site"
    result = cli("build", data, "-o", site, "-j", "1")
    assert result.code == 0, result.output
    return Built(data, site, result)


@pytest.fixture(params=["example", "edge"])
def any_build(request: pytest.FixtureRequest) -> Built:
    built = request.getfixturevalue(f"{request.param}_build")
    assert isinstance(built, Built)
    return built


def ok_slugs(site: Path) -> list[str]:
    _, rows = read_csv(site / "summary.csv")
    return [r["dataset"] for r in rows if r["status"] != "error"]


# ---------------------------------------------------------------- layout


def test_every_contract_path_exists(any_build: Built) -> None:
    site = any_build.site
    for name in ("index.html", "summary.csv", "summary.json", "build.json"):
        assert (site / name).is_file(), name
    assets = [p.suffix for p in (site / "assets").rglob("*") if p.is_file()]
    assert ".js" in assets
    assert ".css" in assets
    slugs = dataset_dirs(site)
    assert slugs
    for slug in slugs:
        folder = site / "datasets" / slug
        for name in ("index.html", "fit.json", "coefficients.csv", "observations.csv"):
            assert (folder / name).is_file(), f"{slug}/{name}"


def test_example_has_one_dataset_per_csv(example_build: Built) -> None:
    every = sorted(p.relative_to(example_build.data).as_posix() for p in example_build.data.rglob("*.csv"))
    csvs = [c for c in every if not c.endswith(".draft.csv")]  # the example's site.toml ignores drafts
    assert len(every) == 16
    assert len(csvs) == 15
    assert dataset_dirs(example_build.site) == sorted(contract_slugs(csvs).values())


# ---------------------------------------------------------------- summary


def test_summary_csv_header_and_rows(any_build: Built) -> None:
    header, rows = read_csv(any_build.site / "summary.csv")
    raw_first_line = (any_build.site / "summary.csv").read_text(encoding="utf-8").splitlines()[0]
    assert raw_first_line.startswith(",".join(SUMMARY_COLUMNS))
    assert header[: len(SUMMARY_COLUMNS)] == SUMMARY_COLUMNS
    slugs = [r["dataset"] for r in rows]
    assert sorted(slugs) == dataset_dirs(any_build.site), "one row per dataset"
    assert len(set(slugs)) == len(slugs)
    for r in rows:
        assert r["status"] in STATUSES


def test_summary_json_matches_summary_csv(any_build: Built) -> None:
    header, rows = read_csv(any_build.site / "summary.csv")
    body = strict_json(any_build.site / "summary.json")
    assert isinstance(body, list)
    assert len(body) == len(rows)
    for obj, row in zip(body, rows, strict=True):
        assert isinstance(obj, dict)
        assert set(obj) == set(header), "summary.json objects carry the same keys as summary.csv"
        for key in SUMMARY_COLUMNS:
            value = obj[key]
            if key in ("dataset", "title", "status", "message"):
                assert isinstance(value, str)
                if key != "title":  # titles may be neutralised in CSV (see the injection test)
                    assert row[key] == value, key
            else:
                assert row[key] == cell_of(value), (row["dataset"], key, row[key], value)


def test_summary_numbers_equal_fit_json(any_build: Built) -> None:
    _, rows = read_csv(any_build.site / "summary.csv")
    for row in rows:
        fit = fit_json(any_build.site, row["dataset"])
        assert row["status"] == fit["status"]
        for key in SUMMARY_COLUMNS[3:10]:
            assert row[key] == cell_of(fit[key]), (row["dataset"], key)


# ---------------------------------------------------------------- per dataset files


def test_fit_json_required_keys(any_build: Built) -> None:
    for slug in dataset_dirs(any_build.site):
        fit = fit_json(any_build.site, slug)
        missing = [k for k in FIT_JSON_KEYS if k not in fit]
        assert not missing, (slug, missing)
        assert fit["dataset"] == slug
        assert fit["status"] in STATUSES
        assert 0 < fit["level"] < 1
        assert isinstance(fit["model"], str)
        assert isinstance(fit["coefficients"], list)
        assert isinstance(fit["messages"], list)
        for m in fit["messages"]:
            assert set(m) >= {"level", "text"}
            assert m["level"] in MESSAGE_LEVELS
            assert isinstance(m["text"], str)
            assert m["text"]
        if fit["status"] != "error":
            assert isinstance(fit["n"], int)
            assert fit["n"] > 0
            assert isinstance(fit["df_resid"], int)
            assert isinstance(fit["df_model"], int)
            assert fit["coefficients"]


def test_coefficients_csv_columns_and_full_precision(any_build: Built) -> None:
    for slug in ok_slugs(any_build.site):
        header, rows = read_csv(any_build.site / "datasets" / slug / "coefficients.csv")
        assert tuple(header[:7]) == COEFFICIENT_COLUMNS, slug
        assert all(h.startswith("robust") for h in header[7:]), (slug, header)
        coefs = fit_json(any_build.site, slug)["coefficients"]
        assert [r["term"] for r in rows] == [c["term"] for c in coefs], "one row per term, model order"
        for row, c in zip(rows, coefs, strict=True):
            assert set(COEFFICIENT_COLUMNS) <= set(c), (slug, sorted(c))
            for col in header[1:]:
                # shortest round-trip repr of the very number in fit.json; NaN/inf/None as empty
                assert row[col] == cell_of(c[col]), (slug, row["term"], col, row[col], c[col])
                if row[col]:
                    assert float(row[col]) == c[col]


@pytest.mark.parametrize(
    ("slug", "terms"),
    [
        ("calibration-phosphate-molybdenum-blue", ["Intercept", "phosphate", "I(phosphate ** 2)"]),
        ("operations-dosing-pump", ["stroke_rate"]),
        ("operations-pump-energy", ["Intercept", "flow", "head"]),
        ("operations-chlorine-decay", ["Intercept", "minutes"]),
    ],
)
def test_example_terms_are_named_as_the_formula_library_names_them(
    example_build: Built, slug: str, terms: list[str]
) -> None:
    _, rows = read_csv(example_build.site / "datasets" / slug / "coefficients.csv")
    assert [r["term"] for r in rows] == terms


def test_quadratic_term_name_and_estimates(edge_build: Built) -> None:
    _, rows = read_csv(edge_build.site / "datasets" / "quad" / "coefficients.csv")
    assert [r["term"] for r in rows] == ["Intercept", "x", "I(x ** 2)"]
    # Independent computation: numpy least squares on the same design.
    table = np.loadtxt(edge_build.data / "quad.csv", delimiter=",", skiprows=1)
    x, y = table[:, 0], table[:, 1]
    beta, *_ = np.linalg.lstsq(np.column_stack([np.ones_like(x), x, x**2]), y, rcond=None)
    got = [float(r["estimate"]) for r in rows]
    assert got == pytest.approx(beta.tolist(), rel=1e-10, abs=1e-12)


def test_observations_columns_and_rows(any_build: Built) -> None:
    for slug in ok_slugs(any_build.site):
        fit = fit_json(any_build.site, slug)
        header, rows = read_csv(any_build.site / "datasets" / slug / "observations.csv")
        assert header[0] == "row", slug
        i = header.index("fitted")
        assert tuple(header[i : i + len(OBSERVATION_COLUMNS)]) == OBSERVATION_COLUMNS, slug
        assert set(DIAGNOSTIC_COLUMNS) <= set(header), slug
        model_columns = header[1:i]
        assert set(fit["variables"]) <= set(model_columns), (slug, model_columns)
        assert len(rows) == fit["n"]
        numbers = [int(r["row"]) for r in rows]
        assert numbers == sorted(numbers)
        assert len(set(numbers)) == len(numbers)
        assert numbers[0] >= 1
        for r in rows:
            for col in (*model_columns, *OBSERVATION_COLUMNS, *DIAGNOSTIC_COLUMNS):
                if r[col]:  # numbers at full precision: the cell is the shortest repr of its float
                    assert repr(float(r[col])) == r[col], (slug, col, r[col])


def test_observation_row_is_the_csv_data_row(any_build: Built) -> None:
    """``row`` is the 1-based data row of the CSV: the values in that row of the source file agree."""
    for slug in ok_slugs(any_build.site):
        fit = fit_json(any_build.site, slug)
        source = any_build.data / fit["source"]
        lines = source.read_text(encoding="utf-8-sig").splitlines()
        sep = csv.Sniffer().sniff(lines[0], delimiters=",;\t|").delimiter
        src_header = next(csv.reader([lines[0]], delimiter=sep))
        _, rows = read_csv(any_build.site / "datasets" / slug / "observations.csv")
        for r in rows:
            data_row = next(csv.reader([lines[int(r["row"])]], delimiter=sep))
            for col in fit["variables"]:
                raw = data_row[src_header.index(col)].strip()
                if sep != ",":
                    raw = raw.replace(",", ".")
                assert float(raw) == pytest.approx(float(r[col]), rel=1e-15), (slug, r["row"], col)


def test_gaps_keep_their_row_numbers(edge_build: Built) -> None:
    _, rows = read_csv(edge_build.site / "datasets" / "gaps" / "observations.csv")
    assert [int(r["row"]) for r in rows] == [1, 3, 5, 6, 7]
    assert [float(r["x"]) for r in rows] == [1.0, 2.0, 4.0, 5.0, 6.0]


def test_residuals_and_intervals_are_consistent(example_build: Built) -> None:
    for slug in ok_slugs(example_build.site):
        fit = fit_json(example_build.site, slug)
        _, rows = read_csv(example_build.site / "datasets" / slug / "observations.csv")
        response = fit["response"]
        for r in rows:
            fitted = float(r["fitted"])
            if r.get(response):
                assert float(r[response]) - fitted == pytest.approx(float(r["residual"]), abs=1e-9)
            assert float(r["mean_ci_low"]) <= fitted <= float(r["mean_ci_high"])
            assert float(r["pred_low"]) <= float(r["mean_ci_low"])
            assert float(r["pred_high"]) >= float(r["mean_ci_high"])


def test_nan_is_empty_cell_in_csv_and_null_in_json(edge_build: Built) -> None:
    site = edge_build.site
    fit = fit_json(site, "const")  # y ~ 1: no slope, so no F test
    assert fit["f_stat"] is None
    assert fit["f_p_value"] is None
    _, rows = read_csv(site / "summary.csv")
    row = next(r for r in rows if r["dataset"] == "const")
    assert row["f_stat"] == ""
    assert row["f_p_value"] == ""
    body = strict_json(site / "summary.json")
    obj = next(o for o in body if o["dataset"] == "const")
    assert obj["f_stat"] is None
    assert obj["f_p_value"] is None


def test_no_json_file_holds_nan_or_infinity(any_build: Built) -> None:
    for path in sorted(any_build.site.rglob("*.json")):
        strict_json(path)


def test_text_cells_that_a_spreadsheet_would_execute_are_neutralised(edge_build: Built) -> None:
    _, rows = read_csv(edge_build.site / "summary.csv")
    row = next(r for r in rows if r["dataset"] == "evil")
    assert not row["title"].startswith(("=", "+", "-", "@", "\t", "\r"))
    assert "=1+2" in row["title"]
    for r in rows:
        for value in r.values():
            if value and value.startswith(("=", "+", "-", "@", "\t", "\r")):
                float(value)  # only numbers may start so (e.g. -0.5)


def test_unknown_sidecar_key_is_named_with_the_closest_known_key(edge_build: Built) -> None:
    fit = fit_json(edge_build.site, "typo")
    assert fit["status"] == "warn"
    texts = [m["text"] for m in fit["messages"] if m["level"] == "warning"]
    assert any("levle" in t and "level" in t.replace("levle", "") for t in texts), texts
    page = (edge_build.site / "datasets" / "typo" / "index.html").read_text(encoding="utf-8")
    assert "levle" in page


# ---------------------------------------------------------------- build.json


def test_build_json_provenance(any_build: Built) -> None:
    body = strict_json(any_build.site / "build.json")
    assert body["sitegen_version"] == __version__
    for lib in ("numpy", "scipy", "pandas", "patsy", "statsmodels"):
        assert body["libraries"][lib] not in ("", "unknown"), lib
    built_at = datetime.fromisoformat(body["built_at"])
    assert built_at.tzinfo is not None
    entries = body["datasets"]
    assert [e["dataset"] for e in entries] == [r["dataset"] for r in read_csv(any_build.site / "summary.csv")[1]]
    for e in entries:
        assert {"dataset", "input_sha256", "reused"} <= set(e)
        assert e["reused"] is False, "a first build reuses nothing"
        fit = fit_json(any_build.site, e["dataset"])
        source = any_build.data / fit["source"]
        assert e["input_sha256"] == hashlib.sha256(source.read_bytes()).hexdigest(), e["dataset"]


# ---------------------------------------------------------------- slugs, hidden files, assumed model


def test_slugs_follow_the_contract_rule(edge_build: Built) -> None:
    assert contract_slugs(list(EDGE_FILES)) == EDGE_FILES  # the table above is the rule applied by hand
    assert dataset_dirs(edge_build.site) == sorted(EDGE_FILES.values())
    by_source = {fit_json(edge_build.site, s)["source"]: s for s in dataset_dirs(edge_build.site)}
    assert by_source == EDGE_FILES


def test_slug_collision_with_a_natural_suffix_stays_unique(tmp_path: Path) -> None:
    data = tmp_path / "data"
    for rel in ("a b.csv", "a-b.csv", "a-b-2.csv"):
        write_csv(data / rel, LINE_CSV)
        write_toml((data / rel).with_suffix(".toml"), {"model": "y ~ x"})
    site = tmp_path / "site"
    assert cli("build", data, "-o", site, "-j", "1").code == 0
    slugs = dataset_dirs(site)
    assert len(slugs) == 3
    assert slugs[0] == "a-b"


def test_sections_come_from_sub_folders(edge_build: Built) -> None:
    fit = fit_json(edge_build.site, "sub-folder-deep-my-file-v2")
    assert fit["source"] == "Sub Folder/Deep/My File (v2).csv"
    assert fit["section"] == str(PurePosixPath(fit["source"]).parent)
    assert fit_json(edge_build.site, "a-b-3")["section"] == "a"
    assert fit_json(edge_build.site, "a-b")["section"] == ""


def test_hidden_and_ignored_files_and_folders_are_skipped(edge_build: Built) -> None:
    sources = {fit_json(edge_build.site, s)["source"] for s in dataset_dirs(edge_build.site)}
    assert not sources & set(HIDDEN_FILES + IGNORED_FILES)
    everything = "\n".join(t for rel, t in text_files(edge_build.site).items() if not rel.startswith("assets/"))
    for name in ("hidden", "visible", "deeper", "scratch", "notes", "skip-w", "a-skip-w"):
        assert name not in dataset_dirs(edge_build.site)
    for text in (".hidden.csv", "notes.old.csv", "scratch/", "skip_w"):
        assert text not in everything


def test_names_starting_with_underscore_are_ordinary_datasets(edge_build: Built) -> None:
    assert fit_json(edge_build.site, "draft")["source"] == "_draft.csv"
    assert fit_json(edge_build.site, "old-y")["section"] == "_old"


def test_two_numeric_columns_without_sidecar_are_fitted_second_on_first(edge_build: Built) -> None:
    fit = fit_json(edge_build.site, "pair")
    assert fit["model"].replace(" ", "") == "second~first"
    assert fit["status"] != "error"
    _, rows = read_csv(edge_build.site / "datasets" / "pair" / "coefficients.csv")
    assert [r["term"] for r in rows] == ["Intercept", "first"]
    # Independent computation: numpy.polyfit on the two columns.
    table = np.loadtxt(edge_build.data / "pair.csv", delimiter=",", skiprows=1)
    slope, intercept = np.polyfit(table[:, 0], table[:, 1], 1)
    assert float(rows[1]["estimate"]) == pytest.approx(slope, rel=1e-12)
    assert float(rows[0]["estimate"]) == pytest.approx(intercept, rel=1e-10)
    page = (edge_build.site / "datasets" / "pair" / "index.html").read_text(encoding="utf-8")
    assert "assumed" in page.lower()
    assert "second ~ first" in page


def test_example_assumed_model_is_said_on_the_page(example_build: Built) -> None:
    fit = fit_json(example_build.site, "operations-backwash-expansion")
    assert fit["model"] == "bed_expansion ~ backwash_rate"
    page = (example_build.site / "datasets" / "operations-backwash-expansion" / "index.html").read_text(
        encoding="utf-8"
    )
    assert "assumed" in page.lower()


# ---------------------------------------------------------------- self-containment


SCHEME = re.compile(r"^[a-zA-Z][a-zA-Z0-9+.-]*:")


def test_nothing_loads_from_the_network(any_build: Built) -> None:
    site = any_build.site
    for page in html_pages(site):
        s = scan(page)
        rel = page.relative_to(site).as_posix()
        for tag, attr, value in s.refs:
            v = value.strip()
            if SCHEME.match(v):
                assert v.lower().startswith("mailto:"), (rel, tag, attr, v)
            assert not v.startswith("//"), (rel, tag, attr, v)
            if tag in ("script", "link", "img", "iframe", "source", "video", "audio", "embed", "object"):
                assert not SCHEME.match(v), (rel, tag, attr, v)
        for style in s.styles:
            assert not re.search(r"url\(\s*['\"]?\s*(https?:)?//", style, re.I), (rel, style)
        text = page.read_text(encoding="utf-8")
        assert not re.search(r'"url"\s*:', text), f"{rel}: a chart spec loads data by URL"
    for css in sorted(site.rglob("*.css")):
        text = css.read_text(encoding="utf-8")
        assert not re.search(r"url\(\s*['\"]?\s*(https?:)?//", text, re.I), css
        assert not re.search(r"@import\s+(url\()?\s*['\"]?\s*(https?:)?//", text, re.I), css
    site_js = site / "assets" / "site.js"
    if site_js.is_file():
        assert not re.search(r"https?://", site_js.read_text(encoding="utf-8")), "theme script"


def test_no_absolute_paths_in_the_site(any_build: Built) -> None:
    needles = {
        str(any_build.data),
        str(any_build.data.resolve()),
        str(any_build.site),
        str(any_build.site.resolve()),
        str(any_build.data.parent),
        str(ROOT),
    }
    for rel, text in text_files(any_build.site).items():
        for needle in needles:
            assert needle not in text, f"{rel} holds the absolute path {needle}"


def test_every_relative_link_resolves(any_build: Built) -> None:
    site = any_build.site.resolve()
    ids_cache: dict[Path, set[str]] = {}

    def ids_of(path: Path) -> set[str]:
        if path not in ids_cache:
            ids_cache[path] = scan(path).ids
        return ids_cache[path]

    pages = html_pages(site)
    assert len(pages) >= 3
    for page in pages:
        rel = page.relative_to(site).as_posix()
        for tag, attr, value in scan(page).refs:
            if attr == "srcset" or SCHEME.match(value.strip()):
                continue
            parts = urlsplit(value.strip())
            target = page if not parts.path else (page.parent / unquote(parts.path)).resolve()
            assert target.is_relative_to(site), f"{rel}: {tag} {attr}={value} leaves the site"
            assert target.is_file(), f"{rel}: {tag} {attr}={value} points at nothing (or at a folder)"
            if parts.fragment and target.suffix == ".html":
                assert unquote(parts.fragment) in ids_of(target), f"{rel}: anchor of {value} is missing"


# ---------------------------------------------------------------- determinism


def test_two_builds_are_byte_identical_except_build_json(
    example_build: Built, tmp_path_factory: pytest.TempPathFactory
) -> None:
    base = tmp_path_factory.mktemp("again")
    data = copy_example(base / "copy of data")
    site = base / "other site"
    result = cli("build", data, "-o", site, "-j", "1")  # and one worker, where the first used a pool
    assert result.code == 0, result.output
    first = site_bytes(example_build.site, skip=("build.json",))
    second = site_bytes(site, skip=("build.json",))
    assert sorted(first) == sorted(second)
    differ = [name for name in first if first[name] != second[name]]
    # assets/built.js carries the build time every page shows (the pages themselves stay identical)
    assert set(differ) <= {"assets/built.js"}

    def timeless(folder: Path) -> str:
        when = str(strict_json(folder / "build.json")["built_at"])
        text = (folder / "assets" / "built.js").read_text(encoding="utf-8")
        return text.replace(when, "WHEN").replace(when.replace("T", " ").replace("+00:00", " UTC"), "WHEN")

    assert timeless(example_build.site) == timeless(site)
    one = strict_json(example_build.site / "build.json")
    two = strict_json(site / "build.json")
    del one["built_at"], two["built_at"]
    for body in (one, two):  # file-system stats (size, time, inode) that let a rebuild skip re-hashing
        for entry in body["datasets"]:
            del entry["stat"], entry["fit_stat"]
        body["files"] = {name: stat[0] for name, stat in body["files"].items()}  # the sizes stay
    assert one == two, "only the build time and the local file stats differ in build.json"
    shutil.rmtree(base)
