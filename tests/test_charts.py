"""Chart specs: valid Vega-Lite, and filled the way the pages rely on.

Every compiled chart kind, and every chart of a real build of the example site, is
validated against the Vega-Lite JSON schema that Altair ships (the schema is the
open standard's own definition; Altair only carries a copy of it).
"""

from __future__ import annotations

import importlib.resources
import json
import re
import subprocess
import sys
from pathlib import Path
from typing import Any

import altair as alt
import jsonschema  # type: ignore[import-untyped]
import pytest

from sitegen.report import charts

ROOT = Path(__file__).resolve().parents[1]
SPEC_RE = re.compile(r'<script type="application/json" class="vl-spec" data-target="([^"]+)">(.*?)</script>', re.S)


@pytest.fixture(scope="module")
def validator() -> jsonschema.protocols.Validator:
    """A validator for the Vega-Lite version Altair writes (``alt.SCHEMA_VERSION``)."""
    major = alt.SCHEMA_VERSION.lstrip("v").split(".")[0]
    text = (importlib.resources.files(f"altair.vegalite.v{major}.schema") / "vega-lite-schema.json").read_text("utf-8")
    schema = json.loads(text)
    cls = jsonschema.validators.validator_for(schema)
    cls.check_schema(schema)
    return cls(schema)


def _errors(validator: jsonschema.protocols.Validator, spec: dict[str, Any]) -> list[str]:
    return [f"{'/'.join(map(str, e.absolute_path))}: {e.message[:200]}" for e in validator.iter_errors(spec)]


@pytest.fixture(scope="module")
def example_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("charts") / "site"
    done = subprocess.run(
        [sys.executable, "-m", "sitegen", "build", str(ROOT / "example_project"), "-o", str(out), "--quiet"],
        capture_output=True,
        text=True,
        check=False,
        cwd=ROOT,
    )
    assert done.returncode == 0, done.stderr
    return out


def _page_specs(site: Path) -> list[tuple[str, str, dict[str, Any]]]:
    found = []
    for page in sorted(site.rglob("*.html")):
        for target, text in SPEC_RE.findall(page.read_text("utf-8")):
            found.append((page.relative_to(site).as_posix(), target, json.loads(text)))
    return found


@pytest.mark.parametrize("kind", charts.CHART_KINDS)
def test_every_compiled_kind_is_valid_vega_lite(validator: jsonschema.protocols.Validator, kind: str) -> None:
    spec = charts.compiled(kind)
    assert _errors(validator, spec) == []
    assert spec["$schema"] == alt.SCHEMA_URL
    assert "config" not in spec, "colours come from the page's theme, not from the spec"


def test_every_chart_of_the_example_site_is_valid_vega_lite(
    validator: jsonschema.protocols.Validator, example_site: Path
) -> None:
    specs = _page_specs(example_site)
    kinds = {target.split("-")[1] for _, target, _ in specs}
    assert {"fit", "residual_by_x", "residual_by_fitted", "residual_order", "shape", "pull", "forest"} <= kinds
    assert {"residual_fitted", "qq", "scale_location", "leverage"}.isdisjoint(kinds)  # the old set is gone
    problems = {f"{page}#{target}": errs for page, target, spec in specs if (errs := _errors(validator, spec))}
    assert problems == {}


def test_every_named_data_source_is_filled(example_site: Path) -> None:
    """Each named data source has its rows in ``datasets`` or borrows them from a chart on the same page."""
    by_page: dict[str, list[tuple[str, dict[str, Any]]]] = {}
    for page, target, spec in _page_specs(example_site):
        by_page.setdefault(page, []).append((target, spec))
    for page, specs in by_page.items():
        lent = {}
        for _, spec in specs:
            for name, kind in spec.get("usermeta", {}).get("sitegen", {}).get("lend", {}).items():
                lent[(kind, name)] = spec["datasets"][name]
        for target, spec in specs:
            borrowed = spec.get("usermeta", {}).get("sitegen", {}).get("borrow", {})
            for name in charts._data_names({k: v for k, v in spec.items() if k != "datasets"}):
                rows = spec["datasets"].get(name)
                assert rows is not None, f"{page}#{target}: data {name!r} is missing"
                if name in borrowed:
                    assert rows == [], f"{page}#{target}: borrowed data is written twice"
                    assert lent[(borrowed[name], name)], f"{page}#{target}: lender of {name!r} has no rows"
                else:
                    assert rows, f"{page}#{target}: data {name!r} is empty"


def _rows(n: int, status: str = "ok", term: str = "x") -> list[dict[str, Any]]:
    return [
        {
            "label": f"set {i}",
            "estimate": 1.0 + i,
            "low": 0.5 + i,
            "high": 1.5 + i,
            "status": status,
            "term": term,
            "se": 0.2,
        }
        for i in range(n)
    ]


def test_forest_keeps_its_rows() -> None:
    # The rows sit at the top level of a faceted spec; they must survive the pruning of empty layers.
    spec = charts.forest_chart(_rows(3), "x")
    assert len(spec["datasets"]["rows"]) == 3
    assert spec["facet"]["row"]["field"] == "heading"
    assert "resolve" not in spec  # one term: one shared scale


def test_forest_of_different_terms_puts_each_row_on_its_own_scale() -> None:
    rows = _rows(2, term="slope") + _rows(1, status="warn", term="other")
    spec = charts.forest_chart(rows, "estimate")
    assert spec["resolve"] == {"scale": {"x": "independent"}}
    assert [r["heading"] for r in spec["datasets"]["rows"]] == [
        "set 0 — slope",
        "set 1 — slope",
        "set 0 — other",
    ]
    legend = spec["spec"]["layer"][1]["encoding"]["shape"]["legend"]
    assert legend["values"] == ["ok", "warn"]  # only the statuses present are listed


def _points(series: list[str], flagged: set[int]) -> list[dict[str, Any]]:
    return [
        {
            "row": i + 1,
            "x": float(i),
            "y": float(i),
            "fitted": float(i),
            "residual": 0.0,
            "kind": "flagged" if i in flagged else "ordinary",
            "series": s,
        }
        for i, s in enumerate(series)
    ]


def _encodings(spec: dict[str, Any], data: str) -> dict[str, Any]:
    (layer,) = [ly for ly in spec["layer"] if ly.get("data", {}).get("name") == data and "shape" in ly["encoding"]]
    enc: dict[str, Any] = layer["encoding"]
    return enc


def test_one_series_colours_the_flagged_points_and_keeps_shape_and_size() -> None:
    spec = charts.fill("residual_by_x", {"points": _points(["observations"] * 4, {2}), "zero": [{"y": 0.0}]})
    enc = _encodings(spec, "points")
    assert enc["color"]["field"] == "kind"
    assert enc["shape"]["field"] == "kind"
    assert enc["shape"]["scale"]["range"] == ["diamond", "square"]
    assert enc["size"]["field"] == "kind"
    assert enc["shape"]["legend"] is not None


def test_several_series_keep_their_colours_and_no_flag_legend_without_flags() -> None:
    spec = charts.fill("residual_order", {"points": _points(["a", "b", "a"], set()), "zero": [{"y": 0.0}]})
    enc = _encodings(spec, "points")
    assert enc["color"]["field"] == "series"
    assert enc["shape"]["legend"] is None
    assert enc["size"]["legend"] is None


def test_empty_layers_are_dropped_with_their_data() -> None:
    band = [{"x": 0.0, "fit": 0.0, "mean_low": -1.0, "mean_high": 1.0, "pred_low": -2.0, "pred_high": 2.0}]
    spec = charts.fill("fit", {"points": _points(["observations"], set()), "band": band}, x_title="a", y_title="b")
    names = {ly.get("data", {}).get("name") for ly in spec["layer"]}
    assert names == {"band", "points"}
    assert set(spec["datasets"]) == {"band", "points"}
    assert spec["layer"][0]["encoding"]["x"]["title"] == "a"


def test_shared_points_are_written_once() -> None:
    pts = _points(["observations"] * 3, set())
    specs = {k: charts.fill(k, {"points": pts}) for k in ("pull", "residual_order")}
    charts.share_points(specs)
    assert specs["pull"]["datasets"]["points"] == [charts.as_columns(pts)]
    assert specs["pull"]["usermeta"] == {"sitegen": {"lend": {"points": "pull"}}}
    assert specs["residual_order"]["datasets"]["points"] == []
    assert specs["residual_order"]["usermeta"] == {"sitegen": {"borrow": {"points": "pull"}}}


def test_standalone_copies_carry_their_own_points() -> None:
    pts = _points(["observations"] * 3, set())
    specs = {k: charts.fill(k, {"points": pts}) for k in ("pull", "residual_order")}
    charts.share_points(specs)
    alone = charts.standalone(specs)
    assert all(spec["datasets"]["points"] == [charts.as_columns(pts)] for spec in alone.values())
    assert all("usermeta" not in spec for spec in alone.values())
    assert specs["residual_order"]["datasets"]["points"] == []  # the page's specs are left as they were


def test_points_go_by_column_and_every_layer_that_draws_them_flattens_them_back() -> None:
    """One record of parallel lists, and a Vega-Lite ``flatten`` of every field: the rows come back as given."""
    pts = _points(["a", "b", "a", "b"], {1})
    for kind in ("fit", "residual_by_x", "residual_by_fitted", "residual_percent", "residual_order", "pull"):
        spec = charts.fill(kind, {"points": pts, "band": [{"x": 0.0, "fit": 0.0}]})
        (columns,) = spec["datasets"]["points"]
        fields = sorted(columns)
        drawing = [node for node in (spec, *spec.get("layer", [])) if node.get("data", {}).get("name") == "points"]
        assert drawing, kind
        for node in drawing:
            assert node["transform"][0] == {"flatten": fields}, kind
        rows = [dict(zip(fields, values, strict=True)) for values in zip(*(columns[f] for f in fields), strict=True)]
        assert rows == pts
    assert "points" not in charts.fill("pull", {"points": []})["datasets"]  # nothing to draw: no layer, no data


def test_numbers_for_drawing_are_shortened_but_exact_where_short() -> None:
    assert charts._short(0.1 + 0.2) == 0.3
    assert charts._short(123456789.0) == 123457000.0
    assert charts._short(-2.5) == -2.5
    assert charts._short(0.0) == 0.0
    assert charts._short(None) is None
    assert charts._short("flagged") == "flagged"


def test_drift_chart_is_valid_vega_lite(validator: jsonschema.protocols.Validator) -> None:
    history = [{"build": f"build {i}", "estimate": 1.0 + i / 10, "low": 0.9, "high": 1.4} for i in (1, 2, 3)]
    spec = charts.drift_chart(history, "slope")
    assert _errors(validator, spec) == []
    assert spec["datasets"]["history"] == history
    assert spec["layer"][0]["encoding"]["y"]["title"] == "slope"


def test_stored_specs_equal_a_fresh_altair_compilation() -> None:
    """chart_specs.json (used at build time) must not drift from the Altair definitions."""
    import json

    from sitegen.report import charts

    stored = json.loads(charts.STORED_SPECS.read_text(encoding="utf-8"))
    assert set(stored) == set(charts.CHART_KINDS)
    for kind in charts.CHART_KINDS:
        assert stored[kind] == charts.build_spec(kind), f"run python -m sitegen.report.charts to refresh {kind}"
