"""Vega-Lite charts: each kind defined once with Altair, then filled with a dataset's numbers.

Building and validating an Altair chart costs tens of milliseconds; filling a
compiled spec costs about as much as ``json.dumps`` of its data. So every chart
kind is built once per process with named data sources and placeholder titles
(:func:`compiled`), and :func:`fill` copies that spec, sets its ``datasets`` and
titles for one dataset. The tests validate every compiled spec, and every spec
of a built example site, against the Vega-Lite schema.

Colours are not written into the specs: the page script passes the theme's
chart colours (light or dark) as the Vega-Lite ``config``. Flagged points are
told apart by shape and size as well as colour; the page script gives the
point-kind colour scale the theme's ``mark`` and ``flag`` colours (without it,
the first two category colours are used).

A dataset page draws the same points in several charts. :func:`dataset_charts`
writes them once, in the first chart, and the other charts name that chart's
``points`` in ``usermeta.sitegen.borrow``; the page script copies them in before
drawing. This keeps a page with thousands of sampled points small.
"""

from __future__ import annotations

import copy
import json
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from functools import cache, lru_cache
from pathlib import Path
from typing import Any

import numpy as np

from sitegen.model import ChartData, FitReport

Spec = dict[str, Any]
X_TITLE = "__x_title__"
Y_TITLE = "__y_title__"
WIDTH = 560
HEIGHT = 320
SMALL = 300
SMALL_HEIGHT = 220
FACET_WIDTH = 420
SIGNIFICANT = 6  # digits kept for drawing; the downloads keep full precision
KINDS = ["ordinary", "flagged"]
POINT_SHAPES = ["diamond", "square"]  # ordinary, flagged (flagged are also larger, and in the flag colour)
SHARED = "points"
CROWDED = 1000  # above this many points, symbols shrink and lines are drawn over them
STATUS_WORDS = (
    "datum.label == 'ok' ? 'sound' : datum.label == 'warn' ? 'check' : datum.label == 'error' ? 'failed' : datum.label"
)


def _points(alt: Any) -> Any:
    return alt.Chart(alt.Data(name="points"))


def _tooltip(alt: Any, fields: Sequence[tuple[str, str]]) -> list[Any]:
    return [
        alt.Tooltip(f"{f}:Q", title=t, format=",.4~g") if f != "row" else alt.Tooltip("row:Q", title="CSV row")
        for f, t in fields
    ]


def _bottom_legend(alt: Any, title: str) -> Any:
    return alt.Legend(title=title, orient="bottom", direction="horizontal")


def _kind_encodings(alt: Any) -> dict[str, Any]:
    """Point kind by shape and size (never by colour alone); series by colour.

    :func:`fill` turns the colour over to the point kind when a chart has only one series.
    """
    kind = {"domain": KINDS}
    return {
        "shape": alt.Shape(
            "kind:N",
            title="Point",
            scale=alt.Scale(**kind, range=POINT_SHAPES),
            legend=_bottom_legend(alt, "Point"),
        ),
        "size": alt.Size(
            "kind:O",
            title="Point",
            scale=alt.Scale(**kind, range=[34, 90]),
            legend=_bottom_legend(alt, "Point"),
        ),
        "color": alt.Color("series:N", title="Series", legend=_bottom_legend(alt, "Series")),
    }


def _point_mark(chart: Any) -> Any:
    return chart.mark_point(filled=True, opacity=0.8, strokeWidth=0)


def _fit_chart(alt: Any) -> Any:
    x = alt.X("x:Q", title=X_TITLE, scale=alt.Scale(zero=False, nice=False))
    y = alt.Y("y:Q", title=Y_TITLE, scale=alt.Scale(zero=False))
    band = alt.Chart(alt.Data(name="band"))
    density = (
        alt.Chart(alt.Data(name="density"))
        .mark_rect()
        .encode(
            x=alt.X("x0:Q"),
            x2="x1:Q",
            y=alt.Y("y0:Q"),
            y2="y1:Q",
            opacity=alt.Opacity(
                "count:Q",
                title="Rows per cell",
                scale=alt.Scale(type="log", range=[0.1, 0.7]),
                legend=alt.Legend(orient="bottom", direction="horizontal", gradientLength=120),
            ),
            tooltip=[alt.Tooltip("count:Q", title="rows in this cell")],
        )
    )
    pred = band.mark_area(opacity=0.13).encode(
        x=x,
        y=alt.Y("pred_low:Q"),
        y2="pred_high:Q",
        tooltip=[
            alt.Tooltip("pred_low:Q", title="prediction low", format=",.4~g"),
            alt.Tooltip("pred_high:Q", title="prediction high", format=",.4~g"),
        ],
    )
    conf = band.mark_area(opacity=0.3).encode(x=x, y=alt.Y("mean_low:Q"), y2="mean_high:Q")
    fitted = band.mark_line(strokeWidth=2).encode(x=x, y=alt.Y("fit:Q"))
    alt_lines = (
        alt.Chart(alt.Data(name="lines"))
        .mark_line(strokeWidth=1.6, clip=True)
        .encode(
            x=x,
            y=alt.Y("y:Q"),
            detail="label:N",
            color=alt.Color("series:N", title="Series", legend=_bottom_legend(alt, "Series")),
            strokeDash=alt.StrokeDash("line:N", title="Other lines", legend=_bottom_legend(alt, "Other lines")),
        )
    )
    pts = _point_mark(_points(alt)).encode(
        x=x,
        y=y,
        **_kind_encodings(alt),
        tooltip=_tooltip(alt, [("row", ""), ("x", "x"), ("y", "y"), ("fitted", "fitted"), ("residual", "residual")]),
    )
    return alt.layer(density, pred, conf, fitted, alt_lines, pts).properties(width=WIDTH, height=HEIGHT)


def _small(chart: Any) -> Any:
    return chart.properties(width=SMALL, height=SMALL_HEIGHT)


def _baseline(alt: Any) -> Any:
    """The zero line of a residual chart: solid and thin, in the axis colour."""
    return alt.Chart(alt.Data(name="zero")).mark_rule(strokeWidth=1.2).encode(y="y:Q")


def _sticks(alt: Any, x: Any, field: str, title: str) -> Any:
    """Each row as a stick from zero to its value, capped by its point (shape and size tell flagged rows)."""
    y = alt.Y(f"{field}:Q", title=title)
    stick = (
        _points(alt).transform_calculate(base="0").mark_rule(strokeWidth=1, opacity=0.55).encode(x=x, y=y, y2="base:Q")
    )
    return stick, y


def _shaded(alt: Any, source: str, opacity: float, tooltip: list[Any]) -> Any:
    """A band across the chart from ``low`` to ``high`` of the named data source, shaded."""
    return (
        alt.Chart(alt.Data(name=source))
        .mark_rect(opacity=opacity)
        .encode(y=alt.Y("low:Q"), y2="high:Q", tooltip=tooltip)
    )


RESIDUAL_TIPS = [("row", ""), ("x", "x"), ("fitted", "fitted"), ("residual", "residual")]


def _across(alt: Any, along: str) -> Any:
    """Residuals in the response's units against x (or the fitted value), inside a band of ±2 s."""
    x = alt.X(f"{along}:Q", title=X_TITLE, scale=alt.Scale(zero=False, nice=False))
    band = _shaded(
        alt,
        "scatter",
        0.12,
        [
            alt.Tooltip("low:Q", title="−2 × scatter about the line", format=",.4~g"),
            alt.Tooltip("high:Q", title="+2 × scatter about the line", format=",.4~g"),
        ],
    )
    stick, y = _sticks(alt, x, "residual", Y_TITLE)
    pts = _point_mark(_points(alt)).encode(
        x=x,
        y=y,
        **_kind_encodings(alt),
        tooltip=_tooltip(alt, [t for t in RESIDUAL_TIPS if t[0] in ("row", along, "residual")]),
    )
    return _small(alt.layer(band, _baseline(alt), stick, pts))


def _percent(alt: Any) -> Any:
    """Residuals as a percentage of the fitted value against x (calibrations; rows at x = 0 left out)."""
    x = alt.X("x:Q", title=X_TITLE, scale=alt.Scale(zero=False), axis=alt.Axis(tickCount=8, labelOverlap=True))
    keep = "isValid(datum.x) && datum.x != 0 && isValid(datum.fitted) && datum.fitted != 0"
    calc = {"percent": "100 * datum.residual / datum.fitted", "base": "0"}
    y = alt.Y("percent:Q", title="Residual, % of fitted value")
    stick = (
        _points(alt)
        .transform_filter(keep)
        .transform_calculate(**calc)
        .mark_rule(strokeWidth=1, opacity=0.55)
        .encode(x=x, y=y, y2="base:Q")
    )
    pts = _point_mark(_points(alt).transform_filter(keep).transform_calculate(**calc)).encode(
        x=x,
        y=y,
        **_kind_encodings(alt),
        tooltip=[
            alt.Tooltip("row:Q", title="CSV row"),
            alt.Tooltip("x:Q", title="x", format=",.4~g"),
            alt.Tooltip("percent:Q", title="residual, % of fitted", format=",.3~f"),
        ],
    )
    return _small(alt.layer(_baseline(alt), stick, pts))


def _run_order(alt: Any) -> Any:
    """Residuals in CSV row order, joined by a thin line: runs above or below zero show drift or carry-over."""
    x = alt.X(
        "row:Q", title="CSV row", scale=alt.Scale(zero=False, nice=False), axis=alt.Axis(tickMinStep=1, format="d")
    )
    y = alt.Y("residual:Q", title=Y_TITLE)
    trail = _points(alt).mark_line(strokeWidth=1, opacity=0.6, interpolate="linear").encode(x=x, y=y, order="row:Q")
    pts = _point_mark(_points(alt)).encode(
        x=x, y=y, **_kind_encodings(alt), tooltip=_tooltip(alt, [("row", ""), ("residual", "residual")])
    )
    return _small(alt.layer(_baseline(alt), trail, pts))


def _pull(alt: Any) -> Any:
    """Each row's Cook's distance by CSV row number, against the limit the influence check uses."""
    x = alt.X(
        "row:Q", title="CSV row", scale=alt.Scale(zero=False, nice=False), axis=alt.Axis(tickMinStep=1, format="d")
    )
    stick, y = _sticks(alt, x, "cooks", "Cook's distance")
    pts = _point_mark(_points(alt)).encode(
        x=x,
        y=y,
        **_kind_encodings(alt),
        tooltip=_tooltip(
            alt,
            [
                ("row", ""),
                ("cooks", "Cook's distance"),
                ("leverage", "leverage"),
                ("studentized", "studentized residual"),
            ],
        ),
    )
    limit = alt.Chart(alt.Data(name="limit"))
    rule = limit.mark_rule(strokeWidth=1.5, strokeDash=[10, 3, 2, 3]).encode(
        y="value:Q", tooltip=[alt.Tooltip("value:Q", title="limit", format=",.3~g")]
    )
    label = limit.mark_text(align="left", baseline="bottom", dy=-3, fontSize=11).encode(
        y="value:Q", x=alt.value(4), text="label:N"
    )
    return _small(alt.layer(stick, rule, label, pts))


def _shape(alt: Any) -> Any:
    """Standardized residuals counted in bins (bars), with the counts a bell shape would give (ticks joined)."""
    bins = alt.Chart(alt.Data(name="spread"))
    x = alt.X("low:Q", title="Standardized residual", bin="binned", axis=alt.Axis(tickMinStep=0.5))
    bars = bins.mark_bar(opacity=0.55, binSpacing=1).encode(
        x=x,
        x2="high:Q",
        y=alt.Y("count:Q", title="Rows"),
        tooltip=[
            alt.Tooltip("low:Q", title="from", format=".1f"),
            alt.Tooltip("high:Q", title="to", format=".1f"),
            alt.Tooltip("count:Q", title="rows"),
            alt.Tooltip("expected:Q", title="a bell shape gives", format=".1f"),
        ],
    )
    expect = (
        bins.transform_calculate(mid="(datum.low + datum.high) / 2")
        .mark_line(
            strokeWidth=1.5,
            strokeDash=[1, 3],
            strokeCap="round",
            point=alt.OverlayMarkDef(filled=False, size=36, strokeWidth=1.5),
        )
        .encode(x="mid:Q", y="expected:Q")
    )
    return _small(alt.layer(bars, expect))


STATUS_SHAPES = {"ok": "circle", "warn": "diamond", "error": "cross"}


def _forest(alt: Any, *, shared_axis: bool) -> Any:
    """One row per dataset, headed by its name: a bar for the interval, a dot for the estimate.

    The dot's shape gives the dataset's status. With ``shared_axis`` every row is drawn on one
    scale (the datasets estimate the same term); otherwise each row gets its own scale, so that
    numbers in different units never share an axis.
    """
    base = alt.Chart()  # the rows come from the facet
    whisker = base.mark_rule(strokeWidth=2.5).encode(
        x=alt.X("low:Q", title=X_TITLE if shared_axis else None, scale=alt.Scale(zero=False)), x2="high:Q"
    )
    dot = base.mark_point(filled=True, size=80, opacity=1).encode(
        x="estimate:Q",
        shape=alt.Shape(
            "status:N",
            title="Status",
            scale=alt.Scale(domain=list(STATUS_SHAPES), range=list(STATUS_SHAPES.values())),
            legend=alt.Legend(title="Status", orient="bottom", direction="horizontal", labelExpr=STATUS_WORDS),
        ),
        tooltip=[
            alt.Tooltip("label:N", title="Dataset"),
            alt.Tooltip("term:N", title="Term"),
            alt.Tooltip("estimate:Q", format=",.4~g"),
            alt.Tooltip("low:Q", title="CI low", format=",.4~g"),
            alt.Tooltip("high:Q", title="CI high", format=",.4~g"),
        ],
    )
    inner = alt.layer(whisker, dot).properties(width=FACET_WIDTH, height=14)
    header = alt.Header(
        labelAngle=0,
        labelOrient="top",
        labelAnchor="start",
        labelAlign="left",
        labelLimit=FACET_WIDTH,
        labelFontSize=12,
        labelPadding=3,
    )
    # Rows in the order given (``order``: a summarised tag's extremes by estimate); without a sort field the
    # facet orders its rows by heading, alphabetically.
    order = alt.EncodingSortField(field="order", op="min", order="ascending")
    chart = inner.facet(
        row=alt.Row("heading:N", title=None, sort=order, header=header), data=alt.Data(name="rows")
    ).properties(spacing=6 if shared_axis else 10)
    return chart if shared_axis else chart.resolve_scale(x="independent")


def _drift(alt: Any) -> Any:
    base = alt.Chart(alt.Data(name="history"))
    x = alt.X("build:O", title="Build", sort=None, axis=alt.Axis(labelAngle=0))
    band = base.mark_rule(strokeWidth=2).encode(
        x=x, y=alt.Y("low:Q", title=Y_TITLE, scale=alt.Scale(zero=False)), y2="high:Q"
    )
    line = base.mark_line(point=alt.OverlayMarkDef(filled=True, size=50)).encode(
        x=x,
        y="estimate:Q",
        tooltip=[
            alt.Tooltip("build:O", title="Build"),
            alt.Tooltip("estimate:Q", format=",.4~g"),
            alt.Tooltip("low:Q", title="CI low", format=",.4~g"),
            alt.Tooltip("high:Q", title="CI high", format=",.4~g"),
        ],
    )
    return alt.layer(band, line).properties(width=SMALL, height=140)


MEAN_DIFFERENCE = "mean difference"
LIMITS_OF_AGREEMENT = "limits of agreement"


def _differences(alt: Any) -> Any:
    """Bland–Altman chart: each pair's difference against the pair's mean, with the mean difference
    and the limits of agreement as rules and their confidence intervals as shaded bands."""
    x = alt.X("mean:Q", title=X_TITLE, scale=alt.Scale(zero=False))
    y = alt.Y("diff:Q", title=Y_TITLE, scale=alt.Scale(zero=False))
    bands = _shaded(
        alt,
        "rule_bands",
        0.14,
        [
            alt.Tooltip("label:N", title="Interval of"),
            alt.Tooltip("low:Q", title="low", format=",.4~g"),
            alt.Tooltip("high:Q", title="high", format=",.4~g"),
        ],
    )
    zero = alt.Chart(alt.Data(name="zero")).mark_rule(strokeDash=[2, 3], opacity=0.6).encode(y="y:Q")
    rules = (
        alt.Chart(alt.Data(name="rules"))
        .mark_rule(strokeWidth=1.6)
        .encode(
            y="y:Q",
            strokeDash=alt.StrokeDash(
                "label:N",
                title="Lines",
                scale=alt.Scale(domain=[MEAN_DIFFERENCE, LIMITS_OF_AGREEMENT], range=[[1, 0], [6, 3]]),
                legend=_bottom_legend(alt, "Lines"),
            ),
            tooltip=[alt.Tooltip("label:N", title="Line"), alt.Tooltip("y:Q", title="value", format=",.4~g")],
        )
    )
    pts = (
        alt.Chart(alt.Data(name="pairs"))
        .mark_point(filled=True, opacity=0.8, strokeWidth=0, size=40)
        .encode(
            x=x,
            y=y,
            tooltip=[
                alt.Tooltip("row:Q", title="CSV row"),
                alt.Tooltip("mean:Q", title="mean of the two", format=",.4~g"),
                alt.Tooltip("diff:Q", title="difference", format=",.4~g"),
            ],
        )
    )
    return alt.layer(bands, zero, rules, pts).properties(width=WIDTH, height=HEIGHT)


def _readback(alt: Any) -> Any:
    """Each calibration standard's read-back deviation in percent against its nominal value."""
    x = alt.X("nominal:Q", title=X_TITLE, scale=alt.Scale(zero=False, padding=14))
    zero = alt.Chart(alt.Data(name="zero")).mark_rule(strokeDash=[4, 3]).encode(y="y:Q")
    means = (
        alt.Chart(alt.Data(name="levels"))
        .mark_line(strokeWidth=1.4, point=alt.OverlayMarkDef(shape="diamond", size=70, filled=True))
        .encode(
            x=x,
            y=alt.Y("percent:Q"),
            tooltip=[
                alt.Tooltip("nominal:Q", title="nominal", format=",.4~g"),
                alt.Tooltip("percent:Q", title="mean read-back error %", format=",.3~g"),
            ],
        )
    )
    pts = (
        alt.Chart(alt.Data(name="replicates"))
        .mark_point(filled=True, opacity=0.75, strokeWidth=0, size=36)
        .encode(
            x=x,
            y=alt.Y("percent:Q", title="Read-back error (% of nominal)", scale=alt.Scale(padding=10)),
            tooltip=[
                alt.Tooltip("nominal:Q", title="nominal", format=",.4~g"),
                alt.Tooltip("found:Q", title="read back", format=",.4~g"),
                alt.Tooltip("percent:Q", title="error %", format=",.3~g"),
            ],
        )
    )
    return alt.layer(zero, pts, means).properties(width=WIDTH, height=SMALL_HEIGHT)


_BUILDERS: dict[str, Callable[[Any], Any]] = {
    "fit": _fit_chart,
    "residual_by_x": lambda alt: _across(alt, "x"),
    "residual_by_fitted": lambda alt: _across(alt, "fitted"),
    "residual_percent": _percent,
    "residual_order": _run_order,
    "pull": _pull,
    "shape": _shape,
    "forest": lambda alt: _forest(alt, shared_axis=True),
    "forest_mixed": lambda alt: _forest(alt, shared_axis=False),
    "drift": _drift,
    "differences": _differences,
    "readback": _readback,
}
CHART_KINDS = tuple(_BUILDERS)


#: Every chart kind compiled ahead of time, so a build needs neither Altair's import
#: (~0.3 s) nor its compilation (~0.3 s) in every worker. Regenerate with
#: ``python -m sitegen.report.charts``; a test checks it equals a fresh compilation.
STORED_SPECS = Path(__file__).with_name("chart_specs.json")


@cache
def _stored() -> dict[str, Spec]:
    try:
        stored: dict[str, Spec] = json.loads(STORED_SPECS.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return stored


@cache
def compiled(kind: str) -> Spec:
    """The Vega-Lite spec of one chart kind: stored, or built with Altair once per process."""
    stored = _stored().get(kind)
    return stored if stored is not None else build_spec(kind)


def build_spec(kind: str) -> Spec:
    """Build one chart kind's spec with Altair."""
    import altair as alt  # noqa: PLC0415 - Altair is only needed to (re)build the stored specs

    spec: Spec = _BUILDERS[kind](alt).to_dict(validate=False)
    spec.pop("config", None)
    if _container_width(spec):
        spec["autosize"] = {"type": "fit-x", "contains": "padding"}
    return spec


def _container_width(spec: Spec) -> bool:
    """Single and layered charts take the width of their figure; heights stay fixed."""
    changed = False
    for node in (spec, *spec.get("layer", [])):
        if "width" in node:
            node["width"] = "container"
            changed = True
    return changed


def _replace_titles(node: Any, titles: dict[str, str]) -> Any:
    if isinstance(node, dict):
        return {k: _replace_titles(v, titles) for k, v in node.items()}
    if isinstance(node, list):
        return [_replace_titles(v, titles) for v in node]
    if isinstance(node, str) and node in titles:
        return titles[node]
    return node


#: A table by column: name -> values (all of one length).
Columns = dict[str, list[Any]]


def as_columns(records: Sequence[dict[str, Any]]) -> Columns:
    """Records (one dict per row) by column, columns in order of first appearance."""
    names = list(dict.fromkeys(k for rec in records for k in rec))
    return {name: [rec.get(name) for rec in records] for name in names}


def fill(
    kind: str,
    datasets: dict[str, list[dict[str, Any]] | Columns],
    *,
    x_title: str = "",
    y_title: str = "",
) -> Spec:
    """A copy of a compiled chart with this dataset's numbers and titles.

    The shared points (``datasets["points"]``, as records or by column) go into the spec by column:
    one record holding a list per field, which a ``flatten`` transform in each layer that draws them
    turns back into rows. Half the size of one record per point, and much cheaper to write.
    """
    given = datasets.get(SHARED) or {}
    points = given if isinstance(given, dict) else as_columns(given)
    n = len(next(iter(points.values()), []))
    rows = {name: rows for name, rows in datasets.items() if name != SHARED}
    shape = _Shape(
        frozenset([name for name, r in rows.items() if r] + ([SHARED] if n else [])),
        one_series=len(set(points.get("series", ()))) <= 1,
        any_flagged="flagged" in points.get("kind", ()),
        crowded=n > CROWDED,
        columns=tuple(sorted(points)) if n else (),
    )
    spec: Spec = json.loads(_skeleton(kind, x_title, y_title, shape))
    spec["datasets"] = {name: rows.get(name, []) for name in spec["datasets"]}
    if SHARED in spec["datasets"]:
        spec["datasets"][SHARED] = [points] if n else []
    return spec


@dataclass(frozen=True, slots=True)
class _Shape:
    """What, besides the rows, decides a chart's layers and legends."""

    filled: frozenset[str]  # data sources with rows
    one_series: bool
    any_flagged: bool
    crowded: bool
    columns: tuple[str, ...] = ()  # the fields of the shared points, which the flatten transforms name


@lru_cache(maxsize=256)
def _skeleton(kind: str, x_title: str, y_title: str, shape: _Shape) -> str:
    """The compiled chart with titles set and layers fitted to which data sources have rows, as JSON text.

    Charts of the same kind differ only in their rows nearly always, so this is worked out once per
    combination and each page parses the text (much cheaper than copying and walking the spec).
    """
    spec = _replace_titles(copy.deepcopy(compiled(kind)), {X_TITLE: x_title, Y_TITLE: y_title})
    assert isinstance(spec, dict)
    names = _data_names(spec)
    if "layer" in spec:  # drop layers with nothing to draw (no density, no extra lines, …)
        spec["layer"] = [ly for ly in spec["layer"] if not _empty_layer(ly, shape.filled)]
        names = _data_names(spec)
    spec["datasets"] = {name: [] for name in sorted(names)}
    if SHARED in names:
        _point_legends(spec, one_series=shape.one_series, any_flagged=shape.any_flagged)
        if shape.crowded:
            _crowded(spec)
        for node in (spec, *spec.get("layer", [])):
            if node.get("data", {}).get("name") == SHARED and shape.columns:
                node["transform"] = [{"flatten": list(shape.columns)}, *node.get("transform", [])]
    return json.dumps(spec)


def _crowded(spec: Spec) -> None:
    """Many points: smaller symbols, no sticks under them, and the lines drawn over the points."""
    if "layer" in spec:  # a stick per row (a rule from zero) would double the marks and hide the points
        spec["layer"] = [
            ly for ly in spec["layer"] if not (_mark_type(ly) == "rule" and ly.get("data", {}).get("name") == SHARED)
        ]
    layers = spec.get("layer", [spec])
    for layer in layers:
        size = layer.get("encoding", {}).get("size", {})
        if size.get("field") == "kind":
            size["scale"]["range"] = [10, 30]
    if "layer" in spec:
        lines = [ly for ly in layers if _mark_type(ly) == "line"]
        spec["layer"] = [ly for ly in layers if _mark_type(ly) != "line"] + lines


def _mark_type(layer: Spec) -> str:
    mark = layer.get("mark")
    return str(mark.get("type") if isinstance(mark, dict) else mark)


def _point_legends(spec: Spec, *, one_series: bool, any_flagged: bool) -> None:
    """Colour by series only when there are several; else colour marks the flagged points.

    A legend for the point kind is shown only when some point is flagged.
    """
    for layer in spec.get("layer", [spec]):
        enc = layer.get("encoding", {})
        if one_series and layer.get("data", {}).get("name") == "lines":
            enc.pop("color", None)  # told apart by dash; the colour now marks flagged points
        if enc.get("color", {}).get("field") == "series" and one_series:
            enc["color"] = {
                "field": "kind",
                "type": "nominal",
                "title": "Point",
                "scale": {"domain": KINDS},
                "legend": copy.deepcopy(enc["shape"].get("legend")),
            }
        if not any_flagged:
            for channel in ("shape", "size", "color"):
                if enc.get(channel, {}).get("field") == "kind":
                    enc[channel]["legend"] = None


def _empty_layer(layer: Spec, filled: frozenset[str]) -> bool:
    data = layer.get("data")
    return isinstance(data, dict) and "name" in data and str(data["name"]) not in filled


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


def axis_label(column: str | None, units: Mapping[str, str]) -> str:
    """A column's name with its unit, for axes and captions ("x" when there is no single predictor)."""
    if not column:
        return "x"
    unit = units.get(column)
    return f"{column} ({unit})" if unit else column


def _short(value: Any) -> Any:
    """A float cut to the digits a chart can show; other values unchanged."""
    if isinstance(value, float) and math.isfinite(value) and value != 0.0:
        return float(f"{value:.{SIGNIFICANT}g}")
    return value


_PLAIN = frozenset((float, int, type(None)))


def _short_column(values: Sequence[Any]) -> list[Any]:
    """A column cut to the digits a chart can show: SIGNIFICANT digits of the column's largest value."""
    if not _PLAIN.issuperset(map(type, values)):
        return [_short(v) for v in values]
    arr = np.array(values, dtype=float)  # None becomes NaN
    finite = np.isfinite(arr)
    top = float(np.max(np.abs(arr[finite]))) if finite.any() else 0.0
    if top == 0.0:
        return [None if v is None else v for v in values]
    decimals = SIGNIFICANT - 1 - math.floor(math.log10(top))
    rounded: list[Any] = np.round(arr, decimals).tolist() if decimals < 300 else arr.tolist()
    for i in np.flatnonzero(~finite).tolist():
        rounded[i] = None
    return rounded


def _records(columns: Sequence[str], rows: Sequence[Sequence[Any]]) -> list[dict[str, Any]]:
    if not rows:
        return []
    cols = [_short_column(col) for col in zip(*rows, strict=True)]
    return [dict(zip(columns, row, strict=True)) for row in zip(*cols, strict=True)]


def point_columns(chart: ChartData) -> Columns:
    """The sampled observations by column, with a point kind and a series for the legend."""
    if not chart.points:
        return {}
    n = len(chart.points)
    cols = {
        name: _short_column(values)
        for name, values in zip(chart.point_columns, zip(*chart.points, strict=True), strict=True)
    }
    flag = cols.pop("flag", None)
    if "row" in cols:
        cols["row"] = [int(v) if isinstance(v, float) else v for v in cols["row"]]
    cols["kind"] = ["flagged" if f == 1.0 else "ordinary" for f in flag] if flag is not None else ["ordinary"] * n
    cols["series"] = list(chart.point_groups) if chart.point_groups else ["observations"] * n
    return cols


def dataset_charts(report: FitReport) -> dict[str, Spec]:
    """Every chart of a dataset page, by kind (the first chart carries the points for the others)."""
    chart = report.chart
    if chart is None:
        return {}
    units = dict(report.units)
    points = point_columns(chart)
    out: dict[str, Spec] = {}
    if chart.x is not None and chart.band:
        out["fit"] = fill(
            "fit",
            {
                "points": points,
                "band": _records(chart.band_columns, chart.band),
                "lines": _line_records(report, chart),
                "density": _records(chart.density_columns, chart.density),
            },
            x_title=axis_label(chart.x, units),
            y_title=axis_label(chart.y, units),
        )
    zero = [{"y": 0.0}]
    s = report.residual_std_error
    scatter = (
        [{"low": _short(-2 * s), "high": _short(2 * s)}]
        if s is not None and math.isfinite(s) and s > 0 and not report.weights
        else []
    )
    y_unit = units.get(chart.y)
    resid_title = f"Residual ({y_unit})" if y_unit else f"Residual (in {chart.y})"
    if chart.x is not None:
        out["residual_by_x"] = fill(
            "residual_by_x",
            {"points": points, "zero": zero, "scatter": scatter},
            x_title=axis_label(chart.x, units),
            y_title=resid_title,
        )
        if _is_calibration(report):
            out["residual_percent"] = fill(
                "residual_percent", {"points": points, "zero": zero}, x_title=axis_label(chart.x, units)
            )
    else:
        out["residual_by_fitted"] = fill(
            "residual_by_fitted",
            {"points": points, "zero": zero, "scatter": scatter},
            x_title=f"Fitted {axis_label(chart.y, units)}",
            y_title=resid_title,
        )
    out["residual_order"] = fill("residual_order", {"points": points, "zero": zero}, y_title=resid_title)
    if chart.spread:
        out["shape"] = fill("shape", {"spread": _records(chart.spread_columns, chart.spread)})
    out["pull"] = fill("pull", {"points": points, "limit": pull_limit(report)})
    out |= purpose_charts(report, units)
    share_points(out)
    return out


def _agreement_data(report: FitReport, percent: bool) -> dict[str, list[dict[str, Any]] | Columns]:
    chart = report.chart
    a = report.agreement_percent if percent else report.agreement
    if chart is None or a is None or "x" not in chart.point_columns:
        return {}
    xi = chart.point_columns.index("x")
    yi = chart.point_columns.index("y")
    ri = chart.point_columns.index("row")
    rows = []
    for p in chart.points:
        x, y = p[xi], p[yi]
        if x is None or y is None:
            continue
        mean = (x + y) / 2.0
        if percent and mean == 0.0:
            continue
        diff = 100.0 * (y - x) / mean if percent else y - x
        rows.append((p[ri], mean, diff))
    mean_label = MEAN_DIFFERENCE
    limit_label = LIMITS_OF_AGREEMENT
    return {
        "pairs": _records(("row", "mean", "diff"), rows),
        "rules": [
            {"y": _short(a.mean_difference), "label": mean_label},
            {"y": _short(a.limit_low), "label": limit_label},
            {"y": _short(a.limit_high), "label": limit_label},
        ],
        "rule_bands": [
            {"low": _short(lo), "high": _short(hi), "label": label}
            for lo, hi, label in (
                (a.mean_difference_ci_low, a.mean_difference_ci_high, mean_label),
                (a.limit_low_ci_low, a.limit_low_ci_high, "lower limit"),
                (a.limit_high_ci_low, a.limit_high_ci_high, "upper limit"),
            )
            if math.isfinite(lo) and math.isfinite(hi)
        ],
        "zero": [{"y": 0.0}],
    }


def _readback_data(report: FitReport) -> dict[str, list[dict[str, Any]] | Columns]:
    reps = [
        (r.nominal, found, pct)
        for r in report.back_calculated
        for found, pct in zip(r.found_each, r.percent_each, strict=True)
        if math.isfinite(pct)
    ]
    levels = [(r.nominal, r.percent) for r in report.back_calculated if math.isfinite(r.percent)]
    if not reps:
        return {}
    return {
        "replicates": _records(("nominal", "found", "percent"), reps),
        "levels": _records(("nominal", "percent"), levels),
        "zero": [{"y": 0.0}],
    }


def purpose_charts(report: FitReport, units: dict[str, str]) -> dict[str, Spec]:
    """The comparison's difference charts and the calibration's read-back chart, where they apply."""
    out: dict[str, Spec] = {}
    chart = report.chart
    if chart is None or chart.x is None:
        return out
    y_unit = f" ({units[chart.y]})" if chart.y in units else ""
    for kind, percent in (("differences", False), ("differences_percent", True)):
        data = _agreement_data(report, percent)
        if data:
            out[kind] = fill(
                "differences",
                data,
                x_title=f"Mean of {chart.y} and {chart.x}{y_unit}",
                y_title=f"{chart.y} − {chart.x}" + (" (% of the mean)" if percent else y_unit),
            )
    data = _readback_data(report)
    if data:
        spec = fill("readback", data, x_title=axis_label(chart.x, units))
        nominal = [r.nominal for r in report.back_calculated if r.nominal > 0]
        if nominal and len(nominal) == len(report.back_calculated) and max(nominal) / min(nominal) >= 20:
            for layer in spec.get("layer", []):  # standards spanning decades: a log axis spreads them out
                enc = layer.get("encoding", {}).get("x")
                if enc is not None:
                    scale = enc.setdefault("scale", {})
                    scale.pop("zero", None)  # a log scale has no zero
                    scale.update({"type": "log", "nice": False})
        out["readback"] = spec
    return out


def share_points(specs: dict[str, Spec]) -> None:
    """Keep the shared points in the first spec that has them; the others borrow them by name."""
    lender = ""
    for name, spec in specs.items():
        if SHARED not in spec.get("datasets", {}):
            continue
        if not lender:
            lender = name
            spec["usermeta"] = {"sitegen": {"lend": {SHARED: name}}}
        else:
            spec["datasets"][SHARED] = []
            spec["usermeta"] = {"sitegen": {"borrow": {SHARED: lender}}}


def standalone(specs: dict[str, Spec]) -> dict[str, Spec]:
    """Copies of a page's specs with borrowed data put back, each drawable on its own.

    For anything that renders a chart outside the page (static SVG/PNG export, for example).
    """
    lent: dict[tuple[str, str], Any] = {}
    for spec in specs.values():
        for name, kind in spec.get("usermeta", {}).get("sitegen", {}).get("lend", {}).items():
            lent[(kind, name)] = spec["datasets"][name]
    out = {}
    for kind, spec in specs.items():
        copied = {k: v for k, v in spec.items() if k != "usermeta"}
        borrowed = spec.get("usermeta", {}).get("sitegen", {}).get("borrow", {})
        if borrowed:
            copied["datasets"] = {**spec["datasets"]}
            for name, lender in borrowed.items():
                copied["datasets"][name] = lent.get((lender, name), [])
        out[kind] = copied
    return out


SHORT_LINE_LABELS = {
    "reverse": "x on y (reverse)",
    "orthogonal": "perpendicular (orthogonal)",
    "deming": "Deming",
    "geometric_mean": "geometric mean",
    "passing_bablok": "Passing–Bablok",
}
EQUALITY_LABEL = "y = x (equality)"


def _line_records(report: FitReport, chart: ChartData) -> list[dict[str, Any]]:
    xs = [r[0] for r in chart.band if r[0] is not None]
    if not xs:
        return []
    x0, x1 = min(xs), max(xs)
    out = []
    for ln in report.lines:
        if ln.method != "ols":
            name = SHORT_LINE_LABELS.get(ln.method, ln.method)
            out += [
                {
                    "label": name,
                    "series": name,
                    "line": name,
                    "x": x,
                    "y": _short(ln.intercept + ln.slope * x),
                }
                for x in (x0, x1)
            ]
    if report.purpose == "comparison":  # the line the two methods would follow if they agreed
        out += [
            {"label": EQUALITY_LABEL, "series": EQUALITY_LABEL, "line": EQUALITY_LABEL, "x": x, "y": x}
            for x in (x0, x1)
        ]
    if report.groups is not None:
        own = f"each {report.groups.column}'s own line"
        out += [
            {
                "label": f"{g.group} line",
                "series": g.group,
                "line": own,
                "x": x,
                "y": _short(g.intercept + g.slope * x),
            }
            for g in report.groups.lines
            for x in (x0, x1)
        ]
    return out


def influence_limit(report: FitReport) -> float | None:
    """The Cook's distance limit of the influence check: the median of F(p, n − p) (common practice)."""
    from sitegen.stats.distributions import f_ppf  # noqa: PLC0415 - only pages with a fit need it

    p, df = len(report.terms), report.df_resid
    if p < 1 or df is None or df < 1:
        return None
    return f_ppf(0.5, p, df)


def pull_limit(report: FitReport) -> list[dict[str, Any]]:
    """The limit line of the pull chart (empty when there is no limit)."""
    cut = influence_limit(report)
    if cut is None or not math.isfinite(cut):
        return []
    return [{"value": _short(cut), "label": f"limit {cut:.3g}: rows above it steer the line"}]


def _is_calibration(report: FitReport) -> bool:
    """A calibration line (the sidecar's ``purpose``)."""
    return report.purpose == "calibration"


def forest_chart(rows: list[dict[str, Any]], term: str) -> Spec:
    """Estimates of one term across datasets with their confidence intervals.

    When the rows estimate different terms (``term`` of each row), each row gets its own scale.
    """
    terms = {row.get("term") for row in rows}
    mixed = len(terms) > 1
    headed = [
        {**row, "heading": f"{row['label']} — {row.get('term')}" if mixed else row["label"], "order": i}
        for i, row in enumerate(rows)
    ]
    spec = fill("forest_mixed" if mixed else "forest", {"rows": headed}, x_title=term)
    present = [s for s in STATUS_SHAPES if any(row.get("status") == s for row in rows)]
    spec["spec"]["layer"][1]["encoding"]["shape"]["legend"]["values"] = present
    return spec


def drift_chart(history: list[dict[str, Any]], term: str) -> Spec:
    """One term's estimate across the kept builds."""
    return fill("drift", {"history": history}, y_title=term)


def write_stored_specs() -> None:
    """Rebuild ``chart_specs.json`` from the Altair definitions."""
    specs = {kind: build_spec(kind) for kind in CHART_KINDS}
    STORED_SPECS.write_text(json.dumps(specs, indent=1, sort_keys=True) + "\n", encoding="utf-8")


if __name__ == "__main__":
    write_stored_specs()
