"""Vega-Lite charts: each kind defined once with Altair, then filled with a dataset's numbers.

Building and validating an Altair chart costs tens of milliseconds; filling a
compiled spec costs about as much as ``json.dumps`` of its data. So every chart
kind is built once per process with named data sources and placeholder titles
(:func:`compiled`), and :func:`fill` copies that spec, sets its ``datasets`` and
titles for one dataset. The tests validate every compiled spec against the
Vega-Lite schema.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Callable, Sequence
from functools import cache
from typing import Any

from sitegen.model import ChartData, FitReport

Spec = dict[str, Any]
X_TITLE = "__x_title__"
Y_TITLE = "__y_title__"
WIDTH = 560
HEIGHT = 340
SMALL = 300


def _points(alt: Any) -> Any:
    return alt.Chart(alt.Data(name="points"))


def _tooltip(alt: Any, fields: Sequence[tuple[str, str]]) -> list[Any]:
    return [alt.Tooltip(f"{f}:Q", title=t, format=",.4~g") if f != "row" else alt.Tooltip("row:Q", title="CSV row")
            for f, t in fields]  # fmt: skip


def _kind_encodings(alt: Any) -> dict[str, Any]:
    return {
        "shape": alt.Shape(
            "kind:N",
            title="Point",
            scale=alt.Scale(domain=["ordinary", "flagged"], range=["circle", "triangle-up"]),
        ),  # fmt: skip
        "color": alt.Color("series:N", title="Series", legend=alt.Legend(orient="bottom", columns=3)),
    }


def _fit_chart(alt: Any) -> Any:
    x = alt.X("x:Q", title=X_TITLE, scale=alt.Scale(zero=False))
    y = alt.Y("y:Q", title=Y_TITLE, scale=alt.Scale(zero=False))
    band = alt.Chart(alt.Data(name="band"))
    density = alt.Chart(alt.Data(name="density")).mark_rect(color="#7f7f7f").encode(
        x=alt.X("x0:Q"), x2="x1:Q", y=alt.Y("y0:Q"), y2="y1:Q",
        opacity=alt.Opacity("count:Q", title="Rows per cell", scale=alt.Scale(type="log", range=[0.08, 0.6])),
        tooltip=[alt.Tooltip("count:Q", title="rows in this cell")],
    )  # fmt: skip
    pred = band.mark_area(opacity=0.14).encode(x=x, y=alt.Y("pred_low:Q"), y2="pred_high:Q",
                                               tooltip=[alt.Tooltip("pred_low:Q", title="prediction low", format=",.4~g"),
                                                        alt.Tooltip("pred_high:Q", title="prediction high", format=",.4~g")])  # fmt: skip
    conf = band.mark_area(opacity=0.32).encode(x=x, y=alt.Y("mean_low:Q"), y2="mean_high:Q")
    fitted = band.mark_line(strokeWidth=2).encode(x=x, y=alt.Y("fit:Q"))
    alt_lines = alt.Chart(alt.Data(name="lines")).mark_line(strokeWidth=1.6, clip=True).encode(
        x=x, y=alt.Y("y:Q"), detail="label:N",
        color=alt.Color("label:N", title="Series"),
        strokeDash=alt.StrokeDash("label:N", title="Line"),
    )  # fmt: skip
    pts = _points(alt).mark_point(filled=True, size=46, opacity=0.85).encode(
        x=x, y=y, **_kind_encodings(alt),
        tooltip=_tooltip(alt, [("row", ""), ("x", "x"), ("y", "y"), ("fitted", "fitted"), ("residual", "residual")]),
    )  # fmt: skip
    return alt.layer(density, pred, conf, fitted, alt_lines, pts).properties(width=WIDTH, height=HEIGHT)


def _residual_fitted(alt: Any) -> Any:
    rule = alt.Chart(alt.Data(name="zero")).mark_rule(strokeDash=[4, 3]).encode(y="y:Q")
    pts = _points(alt).mark_point(filled=True, size=40, opacity=0.85).encode(
        x=alt.X("fitted:Q", title="Fitted value", scale=alt.Scale(zero=False)),
        y=alt.Y("residual:Q", title="Residual"), **_kind_encodings(alt),
        tooltip=_tooltip(alt, [("row", ""), ("fitted", "fitted"), ("residual", "residual")]),
    )  # fmt: skip
    return alt.layer(rule, pts).properties(width=SMALL, height=SMALL * 0.75)


def _qq(alt: Any) -> Any:
    ref = alt.Chart(alt.Data(name="reference")).mark_line(strokeDash=[4, 3]).encode(x="x:Q", y="y:Q")
    pts = _points(alt).mark_point(filled=True, size=40, opacity=0.85).encode(
        x=alt.X("qq_theory:Q", title="Normal quantile"),
        y=alt.Y("std_resid:Q", title="Standardized residual"), **_kind_encodings(alt),
        tooltip=_tooltip(alt, [("row", ""), ("std_resid", "standardized residual"), ("qq_theory", "normal quantile")]),
    )  # fmt: skip
    return alt.layer(ref, pts).properties(width=SMALL, height=SMALL * 0.75)


def _scale_location(alt: Any) -> Any:
    pts = _points(alt).mark_point(filled=True, size=40, opacity=0.85).encode(
        x=alt.X("fitted:Q", title="Fitted value", scale=alt.Scale(zero=False)),
        y=alt.Y("root_abs_std:Q", title="√|standardized residual|"), **_kind_encodings(alt),
        tooltip=_tooltip(alt, [("row", ""), ("fitted", "fitted"), ("root_abs_std", "√|standardized residual|")]),
    )  # fmt: skip
    return pts.properties(width=SMALL, height=SMALL * 0.75)


def _leverage(alt: Any) -> Any:
    contour = alt.Chart(alt.Data(name="contours")).mark_line(strokeDash=[2, 3], clip=True).encode(
        x="h:Q", y="r:Q", detail="branch:N", strokeDash=alt.StrokeDash("label:N", title="Cook's distance"),
    )  # fmt: skip
    pts = _points(alt).mark_point(filled=True, size=40, opacity=0.85).encode(
        x=alt.X("leverage:Q", title="Leverage"),
        y=alt.Y("std_resid:Q", title="Standardized residual"), **_kind_encodings(alt),
        tooltip=_tooltip(alt, [("row", ""), ("leverage", "leverage"), ("studentized", "studentized residual"),
                               ("cooks", "Cook's distance")]),
    )  # fmt: skip
    return alt.layer(contour, pts).properties(width=SMALL, height=SMALL * 0.75)


def _forest(alt: Any) -> Any:
    base = alt.Chart(alt.Data(name="rows"))
    y = alt.Y("label:N", title=None, sort=None)
    whisker = base.mark_rule(strokeWidth=2).encode(x=alt.X("low:Q", title=X_TITLE, scale=alt.Scale(zero=False)),
                                                   x2="high:Q", y=y)  # fmt: skip
    dot = base.mark_point(filled=True, size=60).encode(
        x="estimate:Q", y=y, shape=alt.Shape("status:N", title="Status"),
        tooltip=[alt.Tooltip("label:N", title="Dataset"), alt.Tooltip("estimate:Q", format=",.4~g"),
                 alt.Tooltip("low:Q", title="CI low", format=",.4~g"),
                 alt.Tooltip("high:Q", title="CI high", format=",.4~g")],
    )  # fmt: skip
    return alt.layer(whisker, dot).properties(width=WIDTH - 160)


def _drift(alt: Any) -> Any:
    base = alt.Chart(alt.Data(name="history"))
    x = alt.X("build:O", title="Build", axis=alt.Axis(labelAngle=-30))
    band = base.mark_rule(strokeWidth=2).encode(x=x, y=alt.Y("low:Q", title=Y_TITLE, scale=alt.Scale(zero=False)),
                                                y2="high:Q")  # fmt: skip
    line = base.mark_line(point=True).encode(
        x=x, y="estimate:Q",
        tooltip=[alt.Tooltip("build:O", title="Build"), alt.Tooltip("estimate:Q", format=",.4~g"),
                 alt.Tooltip("low:Q", title="CI low", format=",.4~g"), alt.Tooltip("high:Q", title="CI high", format=",.4~g")],
    )  # fmt: skip
    return alt.layer(band, line).properties(width=WIDTH, height=220)


_BUILDERS: dict[str, Callable[[Any], Any]] = {
    "fit": _fit_chart,
    "residual_fitted": _residual_fitted,
    "qq": _qq,
    "scale_location": _scale_location,
    "leverage": _leverage,
    "forest": _forest,
    "drift": _drift,
}
CHART_KINDS = tuple(_BUILDERS)


@cache
def compiled(kind: str) -> Spec:
    """The Vega-Lite spec of one chart kind, built with Altair once per process."""
    import altair as alt  # noqa: PLC0415 - Altair is only needed when rendering

    spec: Spec = _BUILDERS[kind](alt).to_dict(validate=False)
    spec.pop("config", None)
    _container_width(spec)
    spec["autosize"] = {"type": "fit-x", "contains": "padding"}
    return spec


def _container_width(spec: Spec) -> None:
    """Charts take the width of their figure; heights stay fixed."""
    for node in (spec, *spec.get("layer", [])):
        if "width" in node:
            node["width"] = "container"


def _replace_titles(node: Any, titles: dict[str, str]) -> Any:
    if isinstance(node, dict):
        return {k: _replace_titles(v, titles) for k, v in node.items()}
    if isinstance(node, list):
        return [_replace_titles(v, titles) for v in node]
    if isinstance(node, str) and node in titles:
        return titles[node]
    return node


def fill(
    kind: str, datasets: dict[str, list[dict[str, Any]]], *, x_title: str = "", y_title: str = ""
) -> Spec:
    """A copy of a compiled chart with this dataset's numbers and titles."""
    spec = _replace_titles(copy.deepcopy(compiled(kind)), {X_TITLE: x_title, Y_TITLE: y_title})
    assert isinstance(spec, dict)
    names = _data_names(spec)
    spec["datasets"] = {name: datasets.get(name, []) for name in sorted(names)}
    if "layer" in spec:  # drop layers with nothing to draw (no density, no extra lines, …)
        spec["layer"] = [ly for ly in spec["layer"] if not _empty_layer(ly, spec["datasets"])]
        spec["datasets"] = {k: v for k, v in spec["datasets"].items() if k in _data_names(spec["layer"])}
    return spec


def _empty_layer(layer: Spec, datasets: dict[str, list[dict[str, Any]]]) -> bool:
    data = layer.get("data")
    return isinstance(data, dict) and "name" in data and not datasets.get(str(data["name"]))


def _data_names(node: Any) -> set[str]:
    found: set[str] = set()
    if isinstance(node, dict):
        data = node.get("data")
        if isinstance(data, dict) and "name" in data:
            found.add(str(data["name"]))
        for v in node.values():
            found |= _data_names(v)
    elif isinstance(node, list):
        for v in node:
            found |= _data_names(v)
    return found


def _label(column: str, units: dict[str, str]) -> str:
    unit = units.get(column)
    return f"{column} ({unit})" if unit else column


def point_records(chart: ChartData) -> list[dict[str, Any]]:
    """The sampled observations as records, with a point kind and series for the legend."""
    cols = chart.point_columns
    records = []
    for i, row in enumerate(chart.points):
        rec: dict[str, Any] = dict(zip(cols, row, strict=True))
        flagged = rec.get("flag") == 1.0
        rec["kind"] = "flagged" if flagged else "ordinary"
        rec["series"] = chart.point_groups[i] if chart.point_groups else "observations"
        records.append(rec)
    return records


def dataset_charts(report: FitReport) -> dict[str, Spec]:
    """Every chart of a dataset page, by kind."""
    chart = report.chart
    if chart is None:
        return {}
    units = dict(report.units)
    points = point_records(chart)
    out: dict[str, Spec] = {}
    if chart.x is not None and chart.band:
        band = [dict(zip(chart.band_columns, r, strict=True)) for r in chart.band]
        out["fit"] = fill("fit", {"points": points, "band": band, "lines": _line_records(report, chart),
                                  "density": [dict(zip(chart.density_columns, r, strict=True)) for r in chart.density]},
                          x_title=_label(chart.x, units), y_title=_label(chart.y, units))  # fmt: skip
    out["residual_fitted"] = fill("residual_fitted", {"points": points, "zero": [{"y": 0.0}]})
    qq = [v for v in (p.get("qq_theory") for p in points) if v is not None]
    lim = max((abs(v) for v in qq), default=2.0)
    out["qq"] = fill("qq", {"points": points, "reference": [{"x": -lim, "y": -lim}, {"x": lim, "y": lim}]})
    out["scale_location"] = fill("scale_location", {"points": points})
    out["leverage"] = fill("leverage", {"points": points, "contours": _contours(points, len(report.terms))})
    return out


SHORT_LINE_LABELS = {
    "reverse": "x on y (reverse)",
    "orthogonal": "perpendicular (orthogonal)",
    "deming": "Deming",
    "geometric_mean": "geometric mean",
}


def _line_records(report: FitReport, chart: ChartData) -> list[dict[str, Any]]:
    xs = [r[0] for r in chart.band if r[0] is not None]
    if not xs:
        return []
    x0, x1 = min(xs), max(xs)
    out = [
        {"label": SHORT_LINE_LABELS.get(ln.method, ln.method), "x": x, "y": ln.intercept + ln.slope * x}
        for ln in report.lines if ln.method != "ols" for x in (x0, x1)
    ]  # fmt: skip
    if report.groups is not None:
        out += [{"label": f"{g.group} line", "x": x, "y": g.intercept + g.slope * x}
                for g in report.groups.lines for x in (x0, x1)]  # fmt: skip
    return out


def _contours(points: list[dict[str, Any]], p: int) -> list[dict[str, Any]]:
    """Cook's distance contours D = 0.5 and 1 in (leverage, standardized residual) coordinates."""
    hs = [v for v in (pt.get("leverage") for pt in points) if v is not None]
    rs = [abs(v) for v in (pt.get("std_resid") for pt in points) if v is not None]
    if not hs or p < 1:
        return []
    h_max = min(max(hs) * 1.08, 0.999)
    r_lim = max(rs, default=2.0) * 1.15 + 0.5
    out = []
    for d in (0.5, 1.0):
        for sign, branch in ((1.0, "upper"), (-1.0, "lower")):
            for k in range(1, 41):
                h = h_max * k / 40
                r = sign * math.sqrt(d * p * (1 - h) / h)
                if abs(r) <= r_lim:
                    out.append({"h": h, "r": r, "label": f"D = {d:g}", "branch": f"{d}{branch}"})
    return out


def forest_chart(rows: list[dict[str, Any]], term: str) -> Spec:
    """Estimates of one term across datasets with their confidence intervals."""
    spec = fill("forest", {"rows": rows}, x_title=term)
    spec["height"] = max(60, 22 * len(rows))
    return spec


def drift_chart(history: list[dict[str, Any]], term: str) -> Spec:
    """One term's estimate across the kept builds."""
    return fill("drift", {"history": history}, y_title=term)
