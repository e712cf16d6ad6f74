"""A theme changed between two builds of one process (as ``sitegen watch`` runs them) is used by the second.

Before this was fixed, the theme's chart colours were kept for the life of the process.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

from conftest import LINE_CSV, cli, write_csv


def _chart_colours(site: Path) -> dict[str, dict[str, object]]:
    html = (site / "index.html").read_text("utf-8")
    found = re.search(r'<script type="application/json" id="chart-theme">(.*?)</script>', html, re.S)
    assert found is not None
    colours: dict[str, dict[str, object]] = json.loads(found.group(1))
    return colours


def test_a_theme_changed_between_builds_in_one_process_is_used(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "line.csv", LINE_CSV)
    theme = data / "brand"
    (theme / "templates" / "sections").mkdir(parents=True)
    (theme / "theme.toml").write_text('[charts.light]\nmark = "#8b1e3f"\n', "utf-8")
    section = theme / "templates" / "sections" / "description.html"
    section.write_text("<p>First wording.</p>\n", "utf-8")
    (data / "site.toml").write_text('theme = "brand"\n', "utf-8")
    site = tmp_path / "site"
    assert cli("build", data, "-o", site, "-j", "1").code == 0
    assert _chart_colours(site)["light"]["mark"] == "#8b1e3f"
    assert "First wording." in (site / "datasets" / "line" / "index.html").read_text("utf-8")

    (theme / "theme.toml").write_text('[charts.light]\nmark = "#1e5f8b"\n', "utf-8")
    section.write_text("<p>Second wording, a little longer.</p>\n", "utf-8")
    assert cli("build", data, "-o", site, "-j", "1").code == 0
    assert _chart_colours(site)["light"]["mark"] == "#1e5f8b"
    page = (site / "datasets" / "line" / "index.html").read_text("utf-8")
    assert "Second wording, a little longer." in page
    assert "First wording." not in page
