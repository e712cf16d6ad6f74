"""The index of more datasets than its table lays out at load: the rows after the first 200 travel in a
``<noscript>`` after the table (a second table without scripts), and sorting, filtering and "show all" reach
them in Chromium as they reach the first ones.

Data: 230 subsets of 20 rows of NIST StRD Norris (real data, as in test_tag_summary.py) in three folders, so
that one folder is cut by the window and one lies wholly beyond it; built through the real command line and
opened in Debian's Chromium. The expected orders are computed here from each dataset's fit.json.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pytest
from conftest import BROWSER_MARKS, slopes_by_title
from nist_data import load_nist

from sitegen.cli import main
from sitegen.report.pages import INDEX_WINDOW

FOLDERS = {"alpha": 120, "beta": 90, "gamma": 20}  # the window of 200 ends inside beta; gamma is all beyond it
COUNT = sum(FOLDERS.values())

pytestmark = BROWSER_MARKS


@pytest.fixture(scope="module")
def site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("index-rest")
    case = load_nist("Norris")
    header, *lines = case.csv_path.read_text("ascii").splitlines()
    rng = np.random.default_rng(230)
    i = 0
    for folder, count in FOLDERS.items():
        (base / "data" / folder).mkdir(parents=True)
        for _ in range(count):
            pick = sorted(rng.choice(len(lines), size=20, replace=False).tolist())
            stem = base / "data" / folder / f"part_{i:03d}"
            stem.with_suffix(".csv").write_text("\n".join([header, *(lines[k] for k in pick)]) + "\n", "ascii")
            stem.with_suffix(".toml").write_text(f'title = "Norris part {i}"\nmodel = "y ~ x"\n', "ascii")
            i += 1
    out = base / "site"
    assert main(["build", str(base / "data"), "-o", str(out), "-q"]) == 0
    return out


@pytest.fixture(scope="module")
def slopes(site: Path) -> dict[str, float]:
    """Title → slope, from each dataset's fit.json."""
    out = slopes_by_title(site)
    assert len(out) == COUNT
    return out


def _open(browser: Any, site: Path, width: int = 1280, scripts: bool = True) -> Any:
    ctx = browser.new_context(viewport={"width": width, "height": 900}, java_script_enabled=scripts)
    page = ctx.new_page()
    page.goto((site / "index.html").as_uri())
    return page


def _titles(page: Any, table: str = "#datasets") -> list[str]:
    """The titles of the table's rows as shown, top to bottom."""
    return list(
        page.evaluate(
            """(table) => [...document.querySelectorAll(table + ' tbody tr:not(.group-row)')]
                 .filter(r => !r.hidden && r.getClientRects().length > 0)
                 .map(r => r.querySelector('th a').textContent.trim())""",
            table,
        )
    )


def _page_order() -> list[str]:
    return [f"Norris part {i}" for i in range(COUNT)]  # folders and files in name order, as the page lists them


def test_the_page_lays_out_only_the_first_rows_and_offers_the_rest(browser: Any, site: Path) -> None:
    assert INDEX_WINDOW == 200 < COUNT
    page = _open(browser, site)
    try:
        assert _titles(page) == _page_order()[:INDEX_WINDOW]
        assert page.evaluate("document.querySelectorAll('#datasets tbody tr:not(.group-row)').length") == INDEX_WINDOW
        assert f"Showing {INDEX_WINDOW} of {COUNT} rows" in page.locator("#datasets-more").inner_text()
        page.locator("#datasets-more").get_by_role("button", name=f"Show all {COUNT}").click()
        assert _titles(page) == _page_order()
        # the rows from beyond the window sit in their folders' groups, gamma's group made for them
        groups = page.evaluate(
            """() => [...document.querySelectorAll('#datasets tr.group-row')]
                 .filter(g => !g.hidden).map(g => g.textContent.trim())"""
        )
        assert groups == list(FOLDERS)
    finally:
        page.context.close()


def test_sorting_and_filtering_reach_rows_beyond_the_first_200(
    browser: Any, site: Path, slopes: dict[str, float]
) -> None:
    page = _open(browser, site)
    try:
        ranked = sorted(slopes, key=lambda t: (slopes[t], _page_order().index(t)))
        beyond = set(_page_order()[INDEX_WINDOW:])
        button = page.locator("#datasets thead button", has_text="Estimate")
        button.click()
        assert _titles(page) == ranked[:INDEX_WINDOW]
        button.click()
        descending = sorted(slopes, key=lambda t: (-slopes[t], _page_order().index(t)))
        assert _titles(page) == descending[:INDEX_WINDOW]
        assert beyond & set(ranked[:INDEX_WINDOW])
        assert beyond & set(descending[:INDEX_WINDOW])
        # a text filter finds a dataset that was not in the page at load, in gamma's folder
        page.fill("form.filters input[name=q]", "norris part 229")
        assert _titles(page) == ["Norris part 229"]
        assert page.locator("form.filters output").inner_text() == f"1 of {COUNT} datasets shown"
        page.fill("form.filters input[name=q]", "")
        page.select_option("form.filters select[name=folder]", "gamma")
        assert sorted(_titles(page)) == sorted(_page_order()[-FOLDERS["gamma"] :])
    finally:
        page.context.close()


def test_rows_from_beyond_the_window_are_cards_on_a_phone(browser: Any, site: Path) -> None:
    page = _open(browser, site, width=390)
    try:
        page.fill("form.filters input[name=q]", "norris part 229")
        label = page.evaluate(
            """() => [...document.querySelectorAll('#datasets tbody tr:not(.group-row)')]
                 .filter(r => !r.hidden)[0].querySelector('td').getAttribute('data-label')"""
        )
        assert label == "Folder"
        width = page.evaluate("document.documentElement.scrollWidth")
        assert width <= 390
    finally:
        page.context.close()


def test_without_scripts_every_row_is_shown_in_two_tables(browser: Any, site: Path) -> None:
    page = _open(browser, site, scripts=False)
    try:
        assert _titles(page) == _page_order()[:INDEX_WINDOW]
        assert _titles(page, "#datasets-rest") == _page_order()[INDEX_WINDOW:]
        caption = page.locator("#datasets-rest caption").inner_text()
        assert caption == f"Datasets {INDEX_WINDOW + 1} to {COUNT}, continued from the table above."
    finally:
        page.context.close()
