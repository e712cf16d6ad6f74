"""The index of a large folder in the browser: a summarised tag draws its extremes in the order of their
estimates, and a long table shows a window of rows that sorting and filtering fill from every row.

Data: 65 subsets of 20 rows of NIST StRD Norris (real data, as in test_tag_summary.py), built through the real
command line and opened in Debian's Chromium. The table's window is 200 rows; the test sets it to 20 in the
built page's table (its ``data-window`` attribute) so that 65 rows are "many" without building hundreds.
The expected orders are computed here from each dataset's fit.json, not read from the page.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from conftest import BROWSER_MARKS, slopes_by_title
from test_tag_summary import COUNT, _folder

from sitegen.cli import main
from sitegen.report.tags import EXTREMES

WINDOW = 20

pytestmark = BROWSER_MARKS


@pytest.fixture(scope="module")
def site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("index-scale")
    out = base / "site"
    assert main(["build", str(_folder(base / "data")), "-o", str(out), "-q"]) == 0
    index = out / "index.html"
    text = index.read_text("utf-8")
    assert text.count('data-window="200"') == 1
    index.write_text(text.replace('data-window="200"', f'data-window="{WINDOW}"'), "utf-8")
    return out


@pytest.fixture(scope="module")
def slopes(site: Path) -> dict[str, float]:
    """Title → slope, from each dataset's fit.json."""
    return slopes_by_title(site)


@pytest.fixture
def page(site: Path, browser: Any) -> Iterator[Any]:
    tab = browser.new_page(viewport={"width": 1280, "height": 900})
    try:
        tab.goto((site / "index.html").as_uri())
        tab.wait_for_function(
            "() => [...document.querySelectorAll('.vis')].every(v => v.classList.contains('drawn'))",
            timeout=20_000,
        )
        yield tab
    finally:
        tab.close()


def _titles(page: Any) -> list[str]:
    """The titles of the table's rows as shown, top to bottom."""
    return list(
        page.evaluate(
            """() => [...document.querySelectorAll('#datasets tbody tr:not(.group-row)')]
                 .filter(r => !r.hidden && r.getClientRects().length > 0)
                 .map(r => r.querySelector('th a').textContent.trim())"""
        )
    )


def test_the_extremes_of_a_summarised_tag_are_drawn_in_the_order_of_their_estimates(
    page: Any, slopes: dict[str, float]
) -> None:
    ranked = sorted(slopes, key=lambda t: slopes[t])
    expected = ranked[:EXTREMES] + ranked[-EXTREMES:]
    drawn = page.evaluate(
        """() => [...document.querySelectorAll('#vis-forest-norris svg text')]
             .filter(t => t.textContent.startsWith('Norris part'))
             .map(t => [t.textContent, t.getBoundingClientRect().top])"""
    )
    top_down = [name for name, _ in sorted(drawn, key=lambda item: item[1])]
    assert top_down == expected


def test_a_long_table_shows_a_window_that_sorting_and_filtering_fill_from_every_row(
    page: Any, slopes: dict[str, float]
) -> None:
    by_source = sorted(slopes, key=lambda t: int(t.split()[-1]))  # part_00 … part_64, the page's order
    assert _titles(page) == by_source[:WINDOW]
    more = page.locator("#datasets-more")
    assert more.is_visible()
    assert f"Showing {WINDOW} of {COUNT} rows" in more.inner_text()
    # Sorting by the estimate brings the smallest of all 65 into the window, in order.
    page.locator("#datasets thead button", has_text="Estimate").click()
    ranked = sorted(slopes, key=lambda t: slopes[t])
    assert _titles(page) == ranked[:WINDOW]
    page.locator("#datasets thead button", has_text="Estimate").click()
    assert _titles(page) == ranked[::-1][:WINDOW]
    more.get_by_role("button", name=f"Show {WINDOW} more").click()
    assert _titles(page) == ranked[::-1][: 2 * WINDOW]
    more.get_by_role("button", name=f"Show all {COUNT}").click()
    assert _titles(page) == ranked[::-1]
    assert not more.is_visible()
    # A filter looks at every row, not only those in the window; its matches keep the sorted order.
    page.fill("form.filters input[name=q]", "part 1")
    matching = [t for t in ranked[::-1] if "part 1" in t.lower()]
    assert 10 < len(matching) <= WINDOW
    assert _titles(page) == matching
    assert page.locator("form.filters output").inner_text() == f"{len(matching)} of {COUNT} datasets shown"
    assert not more.is_visible()
    page.fill("form.filters input[name=q]", "")
    assert _titles(page) == ranked[::-1][:WINDOW]
    assert page.locator("form.filters output").inner_text() == f"{COUNT} datasets"
