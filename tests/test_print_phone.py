"""Print and phone: Chromium's print layout on A4 and Letter from a wide and a narrow window, and the pages at
390 px wide. Nothing may be cut off: every table, chart and status fits the paper or the screen.

Paper sizes are ISO 216 (A4, 210 mm) and ANSI (Letter, 8.5 in); the style sheet's ``@page`` margins are 12 mm
left and right, so the printable width is the paper's less 24 mm at CSS's 96 px per inch.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest
from conftest import BROWSER_MARKS

ROOT = Path(__file__).resolve().parents[1]
SHOTS = ROOT / "test-artifacts" / "screenshots"

pytestmark = BROWSER_MARKS

MM = 96 / 25.4  # CSS px per millimetre
PAPER = {"A4": 210.0, "Letter": 215.9}  # widths in mm
MARGINS_MM = 24.0  # 12 mm each side (@page in style.css)
PAGES = (
    "index.html",
    "datasets/field-nitrate-kit-vs-lab/index.html",  # requirements, a comparison
    "datasets/field-chlorine-kit-vs-lab/index.html",  # flagged rows, failing checks
    "datasets/calibration-ammonium-fluorescence/index.html",  # weighted
    "changes.html",
)

# Every element that must fit: its right edge against the printable width (or the screen's).
OVERFLOW = """(limit) => {
  const out = [];
  const wanted = 'main table, main figure.chart, main .vis svg, main .badge, main .req-badge, main dl, main pre';
  for (const el of document.querySelectorAll(wanted)) {
    if (el.closest('[hidden]') || el.getClientRects().length === 0) continue;
    if (getComputedStyle(el).display === 'none') continue;
    const r = el.getBoundingClientRect();
    const name = el.tagName.toLowerCase() + '.' + (el.className.baseVal ?? el.className);
    if (r.right > limit + 1 || r.left < -1) out.push(`${name} ${Math.round(r.left)}..${Math.round(r.right)}`);
    if (el.tagName === 'TABLE' && el.scrollWidth > el.clientWidth + 1) {
      out.push(`table scrolls ${el.scrollWidth} > ${el.clientWidth}`);
    }
  }
  return out;
}"""


@pytest.fixture(scope="module")
def site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("print")
    data = base / "data"
    shutil.copytree(ROOT / "example_project", data, ignore=shutil.ignore_patterns("__pycache__", "*.py"))
    out = base / "site"
    done = subprocess.run(
        [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(out), "--quiet"],
        capture_output=True, text=True, check=False, cwd=ROOT,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    return out.resolve()


def _drawn(page: Any) -> None:
    page.wait_for_function(
        "() => [...document.querySelectorAll('.vis')].every(v => v.classList.contains('drawn')"
        " || v.textContent.includes('could not be drawn'))",
        timeout=20_000,
    )


@pytest.mark.parametrize("window", [1400, 390])
@pytest.mark.parametrize("paper", sorted(PAPER))
def test_printed_pages_fit_the_paper(browser: Any, site: Path, window: int, paper: str) -> None:
    printable = round((PAPER[paper] - MARGINS_MM) * MM)
    ctx = browser.new_context(viewport={"width": window, "height": 900})
    try:
        page = ctx.new_page()
        for rel in PAGES:
            page.set_viewport_size({"width": window, "height": 900})
            page.emulate_media(media="screen")
            page.goto((site / rel).as_uri())
            _drawn(page)
            # the print layout: print media at the paper's printable width (the charts redraw for it)
            page.emulate_media(media="print")
            page.set_viewport_size({"width": printable, "height": 1100})
            page.wait_for_timeout(300)
            _drawn(page)
            assert page.evaluate(OVERFLOW, printable) == [], (rel, paper, window)
            pdf = page.pdf(format=paper, print_background=False)
            assert pdf.startswith(b"%PDF")
            assert pdf.count(b"/Type /Page") >= 1
            captions = page.evaluate("() => [...document.querySelectorAll('figcaption')].map(f => f.innerText)")
            assert not [c for c in captions if ". ." in c or c.rstrip().endswith("..")], rel
        if window == 1400 and paper == "A4":
            SHOTS.mkdir(parents=True, exist_ok=True)
            page.screenshot(path=str(SHOTS / "print-a4-dataset.png"), full_page=True)
    finally:
        ctx.close()


def test_phone_width_keeps_every_column_readable(browser: Any, site: Path) -> None:
    ctx = browser.new_context(viewport={"width": 390, "height": 844}, device_scale_factor=2)
    try:
        page = ctx.new_page()
        for rel in PAGES:
            page.goto((site / rel).as_uri())
            _drawn(page)
            width = page.evaluate("() => document.documentElement.scrollWidth")
            assert width <= 390, (rel, width)
            assert page.evaluate(OVERFLOW, 390) == [], rel
        page.goto((site / "index.html").as_uri())
        # every dataset's status and requirements cell is on screen, labelled with its column
        cells = page.evaluate(
            """() => [...document.querySelectorAll('#datasets tbody tr:not(.group-row)')].map(r => {
                 const s = r.children[8], q = r.children[9];
                 const a = s.getBoundingClientRect(), b = q.getBoundingClientRect();
                 const labels = [s.getAttribute('data-label'), q.getAttribute('data-label')];
                 return [...labels, a.right, b.right, a.width, b.width];
               })"""
        )
        assert cells
        for status_label, req_label, right_s, right_q, w_s, w_q in cells:
            assert (status_label, req_label) == ("Status", "Requirements")
            assert right_s <= 390
            assert right_q <= 390
            assert w_s > 0
            assert w_q > 0
        SHOTS.mkdir(parents=True, exist_ok=True)
        page.screenshot(path=str(SHOTS / "phone-index.png"))
    finally:
        ctx.close()


def test_phone_width_sorts_with_a_list(browser: Any, site: Path) -> None:
    """The stacked cards hide the column headings and their sort buttons, so narrow screens sort by a list
    of the same columns; on a wide screen the list is not shown (the headings sort)."""
    rows = json.loads((site / "summary.json").read_text(encoding="utf-8"))
    ctx = browser.new_context(viewport={"width": 390, "height": 844})
    try:
        page = ctx.new_page()
        page.goto((site / "index.html").as_uri())
        sort = page.locator('select[data-sort-for="datasets"]')
        assert sort.is_visible()
        heading_width = "() => document.querySelector('#datasets thead').getBoundingClientRect().width"
        assert page.evaluate(heading_width) <= 1  # the headings are clipped away (kept for screen readers)
        sort.select_option(label="Rows, high to low")
        got = page.evaluate(
            "() => [...document.querySelectorAll('#datasets tbody tr:not(.group-row)')]"
            ".map(r => Number(r.children[2].getAttribute('data-value')))"
        )
        assert got == sorted((int(r["n"]) for r in rows), reverse=True)
        assert page.evaluate("() => document.getElementById('datasets-sort-status').textContent") == (
            "Sorted by Rows, descending."
        )
        sort.select_option(label="Dataset, A to Z")
        titles = page.evaluate(
            "() => [...document.querySelectorAll('#datasets tbody tr:not(.group-row) th a')].map(a => a.textContent)"
        )
        assert titles == sorted(titles, key=str.lower)
        page.set_viewport_size({"width": 1400, "height": 900})
        assert not sort.is_visible()
        assert page.evaluate(heading_width) > 300
    finally:
        ctx.close()
