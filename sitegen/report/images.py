"""Static SVG copies of a dataset's charts, rendered at build time with vl-convert.

For print and for mail clients without JavaScript (``static_images = true`` in
site.toml). The images use the theme's light chart colours, the same settings
``site.js`` gives the interactive charts.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from sitegen.model import FitReport
from sitegen.report import charts

STATIC_WIDTH = 640


def chart_config(colors: dict[str, Any]) -> dict[str, Any]:
    """A Vega-Lite config from a theme's chart colours (light scheme)."""
    c = colors.get("light", {})
    axis = {"labelColor": c.get("text"), "titleColor": c.get("text"), "gridColor": c.get("grid"),
            "domainColor": c.get("domain"), "tickColor": c.get("domain")}  # fmt: skip
    return {
        "background": "white",
        "range": {"category": c.get("category")},
        "mark": {"color": c.get("mark")},
        "area": {"color": c.get("band", c.get("mark"))},
        "line": {"color": c.get("mark")},
        "point": {"color": c.get("mark")},
        "rule": {"color": c.get("domain")},
        "text": {"color": c.get("text")},
        "rect": {"color": c.get("density", c.get("domain"))},
        "axis": axis,
        "legend": {"labelColor": c.get("text"), "titleColor": c.get("text")},
        "view": {"stroke": c.get("grid")},
    }


def _fixed_width(node: Any) -> Any:
    if isinstance(node, dict):
        return {k: (STATIC_WIDTH if k == "width" and v == "container" else _fixed_width(v)) for k, v in node.items()}
    if isinstance(node, list):
        return [_fixed_width(v) for v in node]
    return node


def _kind_colours(spec: dict[str, Any], c: dict[str, Any]) -> None:
    """Flagged points in the theme's flag colour, as site.js does on the page."""
    for layer in spec.get("layer", [spec]):
        colour = layer.get("encoding", {}).get("color")
        if isinstance(colour, dict) and colour.get("field") == "kind":
            colour.setdefault("scale", {})["range"] = [c.get("mark"), c.get("flag", c.get("mark"))]


def write_chart_images(report: FitReport, folder: Path, colors: dict[str, Any]) -> list[str]:
    """Write ``chart-<kind>.svg`` for every chart of the dataset page; returns the file names."""
    import vl_convert as vlc  # noqa: PLC0415

    specs = charts.standalone(charts.dataset_charts(report))
    config = chart_config(colors)
    names = []
    for kind, spec in sorted(specs.items()):
        full = _fixed_width(spec)
        full.pop("autosize", None)
        full["config"] = config
        _kind_colours(full, colors.get("light", {}))
        svg: str = vlc.vegalite_to_svg(full)
        name = f"chart-{kind.replace('_', '-')}.svg"
        tmp = folder / f".{name}.{os.getpid()}.tmp"
        tmp.write_text(svg, encoding="utf-8")
        tmp.replace(folder / name)  # never write through a hard link shared with the previous site
        names.append(name)
    return names
