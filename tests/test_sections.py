"""The sectioned dataset page: one ordered list of section templates, each reading typed view fields.

The checks compare what the page says with what ``fit.json`` and the page's own chart specification hold,
so the view model (report/dataset_view.py) is tested against the data it summarises, not against itself.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

from conftest import ROOT, Built, cli, dataset_page, write_csv
from markupsafe import escape

from sitegen.model import check_warning, from_json
from sitegen.report.sections import DATASET_SECTIONS, shown_sections
from sitegen.report.theme import default_theme_dir

SECTIONS = ROOT / "themes" / "default" / "templates" / "sections"


def test_every_registered_section_has_a_template_and_every_template_is_registered() -> None:
    names = [s.name for s in DATASET_SECTIONS]
    assert len(names) == len(set(names)), "a section is listed twice"
    on_disk = sorted(p.stem for p in SECTIONS.glob("*.html"))
    assert sorted(names) == on_disk


def test_the_default_theme_is_found_at_the_top_of_the_checkout() -> None:
    """The editable install (make's venv) finds the theme in the repository's themes/ folder."""
    assert default_theme_dir() == ROOT / "themes" / "default"


def test_failed_and_fitted_pages_share_head_and_tail() -> None:
    failed = [s.name for s in shown_sections(failed=True, purpose="relation")]
    fitted = [s.name for s in shown_sections(failed=False, purpose="relation")]
    assert failed[:2] == fitted[:2] == ["heading", "description"]
    assert failed[-2:] == fitted[-2:] == ["method", "downloads"]
    assert "failure" in failed
    assert "failure" not in fitted
    assert "estimates" in fitted
    assert "estimates" not in failed


def test_section_templates_neither_parse_messages_nor_open_chart_specs() -> None:
    """Sections read typed fields: no string surgery on message text, no look inside a chart specification."""
    for path in sorted(SECTIONS.glob("*.html")):
        text = path.read_text("utf-8")
        assert ".split(" not in text, path.name
        assert "m.text" not in text or path.name == "notes.html", path.name
        assert ".datasets" not in text, path.name
        assert '"kind"' not in text, path.name
        # chart specs are only handed on, whole, to the chart macro (or asked whether the page has one)
        assert not re.search(r"v\.charts\.\w+\.|v\.charts\.get\([^)]*\)\.|v\.charts\[", text), path.name


def test_a_flagged_check_is_stated_once_with_the_check(example_build: Built) -> None:
    """The check's warning is in fit.json's messages; the page states it with the check, not again as a note."""
    slug = "calibration-ammonium-fluorescence"
    report = from_json((example_build.site / "datasets" / slug / "fit.json").read_text("utf-8"))
    flagged = [d for d in report.diagnostics if d.flag]
    assert flagged
    html = dataset_page(example_build.site, slug)
    for d in flagged:
        assert check_warning(d) in report.messages
        verdicts = html.split('<ul class="verdicts">')[1].split("</ul>")[0]
        assert escape(d.text) in verdicts, d.label
    notes = html.split('id="h-notes"')
    if len(notes) > 1:  # any notes shown are not the check's own words
        listed = notes[1].split("</section>")[0]
        assert all(escape(d.text) not in listed for d in flagged)


def test_the_large_dataset_note_counts_what_the_chart_draws(tmp_path: Path) -> None:
    """The note's figures equal the points in the page's own chart specification and the row count in fit.json."""
    rows = ["x,y"]
    for i in range(1, 6001):  # invented: y = 0.5 x + a wobble, with a few keying errors far off the line
        y = 0.5 * i + ((i * 37) % 11 - 5) * 0.1 + (400.0 if i % 997 == 0 else 0.0)
        rows.append(f"{i},{y:.3f}")
    write_csv(tmp_path / "data" / "big.csv", "\n".join(rows) + "\n")
    site = tmp_path / "site"
    assert cli("build", tmp_path / "data", "-o", site, "-j", "1").code == 0
    report = from_json((site / "datasets" / "big" / "fit.json").read_text("utf-8"))
    assert report.chart is not None
    assert report.chart.sampled
    html = dataset_page(site, "big")
    specs = [
        json.loads(s) for s in re.findall(r'<script type="application/json" class="vl-spec"[^>]*>(.*?)</script>', html)
    ]
    drawn = [p for spec in specs for p in spec.get("datasets", {}).get("points", [])]
    assert drawn, "no chart carries the points"
    kinds = drawn[0]["kind"]
    note = re.search(r"It has ([\d,   ]+) rows.*?The charts draw ([\d,   ]+) of them", html, re.S)
    assert note is not None

    def number(text: str) -> int:
        return int(re.sub(r"\D", "", text))

    assert number(note.group(1)) == report.n_rows == report.chart.n_total == 6000
    assert number(note.group(2)) == len(kinds) < 6000
    flagged_drawn = kinds.count("flagged")
    assert report.flagged_total > 0
    if flagged_drawn < report.flagged_total:
        assert f"the {flagged_drawn} most influential of the {report.flagged_total} flagged rows" in html
    else:
        assert "every flagged row" in html
