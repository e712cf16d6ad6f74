"""The built site in a real browser: Debian's Chromium driven by Playwright, pages opened from file://.

Every page of the example site must open without console errors or Vega warnings,
request nothing outside the site folder, and draw every chart; the index table must
sort and filter; the keyboard must reach every control; the dark scheme and print
media must work. Expected orders and counts come from the site's own summary.json and
fit.json files, not from the page under test. Screenshots are kept in
``test-artifacts/screenshots/`` for a person to look at.

No browser is ever downloaded: without /usr/bin/chromium these tests are skipped
(``scripts/ensure-browser.sh`` installs it on Debian).
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any
from urllib.parse import unquote, urlparse

import numpy as np
import pytest
from conftest import BROWSER_MARKS

ROOT = Path(__file__).resolve().parents[1]
SHOTS = ROOT / "test-artifacts" / "screenshots"
THEME_TOML = ROOT / "themes" / "default" / "theme.toml"

pytestmark = BROWSER_MARKS

CHART_WAIT_MS = 20_000
VIEWPORT = {"width": 1280, "height": 900}
# A page with a deliberately wrong row: flagged points, several checks failing.
SHOWCASE = "field-chlorine-kit-vs-lab"


def _build(data: Path, out: Path, status: int = 0) -> Path:
    done = subprocess.run(
        [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(out), "--quiet"],
        capture_output=True,
        text=True,
        check=False,
        cwd=ROOT,
    )
    assert done.returncode == status, done.stderr
    return out.resolve()


@pytest.fixture(scope="module")
def site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The example site, built twice with one dataset changed in between, so that the change
    report has something to show (a table of refitted datasets and a drift chart)."""
    base = tmp_path_factory.mktemp("browser")
    data = base / "data"
    shutil.copytree(ROOT / "example_project", data, ignore=shutil.ignore_patterns("__pycache__", "*.py"))
    out = base / "site"
    _build(data, out)
    changed = data / "calibration" / "nitrate_uv.csv"
    lines = changed.read_text("utf-8").splitlines(keepends=True)
    changed.write_text("".join(lines[:-1]), "utf-8")  # one standard fewer
    return _build(data, out)


@pytest.fixture(scope="module")
def shots() -> Path:
    SHOTS.mkdir(parents=True, exist_ok=True)
    return SHOTS


def _inside(url: str, site: Path) -> bool:
    if not url.startswith("file://"):
        return False
    return Path(unquote(urlparse(url).path)).resolve().is_relative_to(site)


@contextmanager
def watched(browser: Any, site: Path, **context: Any) -> Iterator[tuple[Any, list[str]]]:
    """A page whose every request is checked and whose console is listened to.

    Requests outside the site folder are refused and reported; so are console errors,
    uncaught exceptions, failed requests and Vega's warnings.
    """
    problems: list[str] = []
    ctx = browser.new_context(viewport=VIEWPORT, **context)

    def route(r: Any) -> None:
        if _inside(r.request.url, site):
            r.continue_()
        else:
            problems.append(f"request outside the site: {r.request.url}")
            r.abort()

    def console(msg: Any) -> None:
        if msg.type == "error" or (msg.type == "warning" and msg.text.startswith("WARN")):
            problems.append(f"console {msg.type}: {msg.text}")

    ctx.route("**/*", route)
    ctx.set_default_timeout(10_000)
    page = ctx.new_page()
    page.on("console", console)
    page.on("pageerror", lambda exc: problems.append(f"page error: {exc}"))
    page.on("requestfailed", lambda req: problems.append(f"request failed: {req.url} {req.failure}"))
    try:
        yield page, problems
    finally:
        ctx.close()


def _open(page: Any, site: Path, rel: str) -> None:
    # The single file draws every chart of the example (about 90) before "load": on a busy machine, over 10 s.
    page.goto((site / rel).as_uri(), timeout=CHART_WAIT_MS)
    page.wait_for_function(
        "() => [...document.querySelectorAll('.vis')].every(v => v.classList.contains('drawn')"
        " || v.textContent.includes('could not be drawn'))",
        timeout=CHART_WAIT_MS,
    )


CHART_STATE = """() => [...document.querySelectorAll('.vis')].map(v => {
  const svg = v.querySelector('svg.marks');
  const fig = v.closest('figure');
  return {
    id: v.id,
    svg: !!svg,
    marks: svg ? svg.querySelectorAll('g.role-mark > *').length : 0,
    role: v.getAttribute('role'),
    label: v.getAttribute('aria-label') || '',
    caption: fig ? fig.querySelector('figcaption').textContent : '',
    text: v.textContent.slice(0, 200),
  };
})"""


def _chart_problems(page: Any) -> list[str]:
    out = []
    for c in page.evaluate(CHART_STATE):
        if not c["svg"] or c["marks"] == 0:
            out.append(f"{c['id']}: not drawn ({c['text']!r})")
        if c["role"] != "img" or not c["label"] or c["label"] not in c["caption"]:
            out.append(f"{c['id']}: text alternative lost (role={c['role']!r}, label={c['label'][:40]!r})")
    return out


def _pages(site: Path) -> list[str]:
    return sorted(p.relative_to(site).as_posix() for p in site.rglob("*.html"))


def _summary(site: Path) -> list[dict[str, Any]]:
    rows: list[dict[str, Any]] = json.loads((site / "summary.json").read_text("utf-8"))
    return rows


def _fits(site: Path) -> dict[str, dict[str, Any]]:
    return {p.parent.name: json.loads(p.read_text("utf-8")) for p in sorted(site.glob("datasets/*/fit.json"))}


# ---------------------------------------------------------------- every page


def test_every_page_opens_cleanly_and_draws_its_charts(browser: Any, site: Path, shots: Path) -> None:
    pages = _pages(site)
    assert {"index.html", "changes.html"} <= set(pages)
    assert len(pages) == 2 + len(_summary(site))
    report: dict[str, list[str]] = {}
    drawn = 0
    with watched(browser, site) as (page, problems):
        for rel in pages:
            _open(page, site, rel)
            found = problems + _chart_problems(page)
            problems.clear()
            if found:
                report[rel] = found
            n = page.locator(".vis").count()
            drawn += n
            if rel.startswith("datasets/") and "could not be fitted" not in page.content():
                assert n >= 4, f"{rel}: expected the residual charts, found {n} charts"
            if rel == "changes.html":
                assert n >= 1, "the change report should show the drift of the changed dataset"
            if rel == "index.html":
                page.screenshot(path=str(shots / "index.png"), full_page=True)
            elif rel == f"datasets/{SHOWCASE}/index.html":
                page.screenshot(path=str(shots / "dataset.png"), full_page=True)
            elif rel == "changes.html":
                page.screenshot(path=str(shots / "changes.png"), full_page=True)
    assert report == {}
    assert drawn > 4 * len(pages) - 8


def test_the_guard_sees_requests_outside_the_site(browser: Any, site: Path) -> None:
    """The request check is not vacuous: outside requests, even file:// ones, are caught."""
    with watched(browser, site) as (page, problems):
        _open(page, site, "index.html")
        assert problems == []
        page.evaluate(
            """() => { fetch('https://example.invalid/x').catch(() => {});
                       const i = new Image(); i.src = 'file:///etc/hostname'; document.body.append(i); }"""
        )
        page.wait_for_timeout(500)
    assert any("https://example.invalid/x" in p for p in problems)
    assert any("file:///etc/hostname" in p for p in problems)


def test_charts_share_one_copy_of_the_points(browser: Any, site: Path) -> None:
    html = (site / "datasets" / SHOWCASE / "index.html").read_text("utf-8")
    assert html.count('"borrow"') == 3
    with watched(browser, site) as (page, problems):
        _open(page, site, f"datasets/{SHOWCASE}/index.html")
        lent = page.evaluate(
            "() => JSON.parse(document.querySelector('script.vl-spec[data-target=vis-fit]').textContent)"
            ".datasets.points[0].row.length"
        )
        for vis in ("residual_by_x", "residual_order", "pull"):
            symbols = page.locator(f"#vis-{vis} svg g.mark-symbol.role-mark > path").count()
            assert symbols == lent, vis
        assert problems == []


# ---------------------------------------------------------------- the index table


ROWS = "#datasets tbody tr:not(.group-row)"


def _column(page: Any, index: int) -> list[str | None]:
    values: list[str | None] = page.evaluate(
        """(i) => [...document.querySelectorAll('#datasets tbody tr:not(.group-row)')]
                 .filter(r => !r.hidden).map(r => r.children[i].getAttribute('data-value'))""",
        index,
    )
    return values


def _shown(page: Any) -> list[str]:
    hrefs: list[str] = page.evaluate(
        """() => [...document.querySelectorAll('#datasets tbody tr:not(.group-row)')]
                 .filter(r => !r.hidden && r.getClientRects().length > 0)
                 .map(r => r.querySelector('a').getAttribute('href').split('/')[1])"""
    )
    return hrefs


def _numbers(values: list[str | None]) -> list[float | None]:
    return [float(v) if v not in (None, "") else None for v in values]


def test_index_table_sorts_by_every_column(browser: Any, site: Path) -> None:
    summary = _summary(site)
    with watched(browser, site) as (page, problems):
        _open(page, site, "index.html")
        header = page.locator("#datasets thead th")

        def click(name: str) -> None:
            page.get_by_role("button", name=name, exact=True).click()

        # Rows: ascending, then descending; expected values from summary.json.
        rows_n = sorted(float(r["n"]) for r in summary)
        click("Rows")
        assert _numbers(_column(page, 2)) == rows_n
        assert header.nth(2).get_attribute("aria-sort") == "ascending"
        assert page.locator("#datasets tr.group-row:visible").count() == 0  # flattened while sorted
        click("Rows")
        assert _numbers(_column(page, 2)) == rows_n[::-1]
        assert header.nth(2).get_attribute("aria-sort") == "descending"

        # Dataset titles, case-insensitively.
        click("Dataset")
        assert [v.lower() for v in _column(page, 0) if v] == sorted(r["title"].lower() for r in summary)
        assert header.nth(2).get_attribute("aria-sort") == "none"

        # R², from the keyboard.
        page.get_by_role("button", name="R²", exact=True).focus()
        page.keyboard.press("Enter")
        assert _numbers(_column(page, 6)) == sorted(float(r["r_squared"]) for r in summary)

        # Every other sortable column gives a monotone order with empty cells last.
        for index, name in (
            (1, "Folder"),
            (3, "Term"),
            (4, "Estimate"),
            (5, "Confidence interval"),  # the example mixes 95% and 99%: each cell states its own
            (7, "Scatter about line"),
            (8, "Status"),
            (9, "Requirements"),
        ):
            for _ in range(2):
                click(name)
                direction = header.nth(index).get_attribute("aria-sort")
                values = _column(page, index)
                numeric = name in ("Estimate", "Confidence interval", "Scatter about line")
                keyed = [v for v in (_numbers(values) if numeric else values) if v not in (None, "")]
                assert keyed == sorted(keyed, reverse=direction == "descending"), (name, direction)
                assert values[len(keyed) :] == [v for v in values if v in (None, "")], name
        assert len(_column(page, 0)) == len(summary)
        assert problems == []


def test_index_table_filters_by_text_status_tag_and_folder(browser: Any, site: Path) -> None:
    fits = _fits(site)
    summary = {r["dataset"]: r for r in _summary(site)}
    everyone = sorted(fits)

    def expected(keep: Any) -> list[str]:
        return sorted(slug for slug, f in fits.items() if keep(f))

    tag = sorted({t for f in fits.values() for t in f["tags"]})[0]
    with watched(browser, site) as (page, problems):
        _open(page, site, "index.html")
        form = page.locator("form.filters")
        assert sorted(_shown(page)) == everyone

        form.get_by_label("Find").fill("Chlorine")
        want = expected(lambda f: "chlorine" in " ".join([f["title"], f["source"], f["model"], *f["tags"]]).lower())
        assert 0 < len(want) < len(everyone)
        assert sorted(_shown(page)) == want
        assert form.locator("output").inner_text() == f"{len(want)} of {len(everyone)} datasets shown"

        form.get_by_label("Find").fill("")
        form.get_by_label("Status").select_option("warn")
        want = sorted(s for s, r in summary.items() if r["status"] == "warn")
        assert want
        assert sorted(_shown(page)) == want

        form.get_by_label("Status").select_option("")
        form.get_by_label("Tag").select_option(tag)
        assert sorted(_shown(page)) == expected(lambda f: tag in f["tags"])

        form.get_by_label("Tag").select_option("")
        form.get_by_label("Folder").select_option("field")
        want = expected(lambda f: f["section"] == "field")
        assert sorted(_shown(page)) == want
        # Group headings of folders with nothing left are hidden too.
        headings = page.locator("#datasets tr.group-row:visible").all_inner_texts()
        assert [t.strip().lower() for t in headings] == ["field"]

        form.get_by_label("Find").fill("no dataset is called this")
        assert _shown(page) == []
        assert page.locator("#datasets-empty").is_visible()

        form.get_by_role("button", name="Clear").click()
        page.wait_for_function("() => !document.querySelector('#datasets tbody tr[hidden]:not(.group-row)')")
        assert sorted(_shown(page)) == everyone

        # A tag link on a dataset page opens the index filtered by that tag.
        page.goto((site / "index.html").as_uri() + f"?tag={tag}")
        page.wait_for_load_state("load")
        assert sorted(_shown(page)) == expected(lambda f: tag in f["tags"])
        assert form.get_by_label("Tag").input_value() == tag
        assert problems == []


FOCUSABLE = """() => {
  const sel = 'a[href], button, input, select, textarea, summary, [tabindex]:not([tabindex="-1"])';
  const els = [...document.querySelectorAll(sel)].filter(e => !e.disabled && e.getClientRects().length > 0);
  els.forEach((e, i) => e.setAttribute('data-kb', String(i)));
  return els.map(e => e.tagName.toLowerCase() + ':'
    + (e.textContent || e.getAttribute('name') || '').trim().slice(0, 30));
}"""

ACTIVE = """() => {
  const e = document.activeElement;
  if (!e || e === document.body) { return null; }
  const s = getComputedStyle(e);
  const ring = s.outlineStyle !== 'none' && parseFloat(s.outlineWidth) >= 2;
  return { kb: e.getAttribute('data-kb'), outline: ring };
}"""


def test_keyboard_reaches_every_control_of_the_index_in_order(browser: Any, site: Path) -> None:
    with watched(browser, site) as (page, problems):
        _open(page, site, "index.html")
        controls = page.evaluate(FOCUSABLE)
        kinds = {c.split(":")[0] for c in controls}
        assert {"a", "button", "input", "select", "summary"} <= kinds
        visited: list[int] = []
        no_ring: list[str] = []
        for _ in range(len(controls) + 5):
            page.keyboard.press("Tab")
            active = page.evaluate(ACTIVE)
            if active is None or active["kb"] is None:
                continue
            index = int(active["kb"])
            if visited and index == visited[0]:
                break
            visited.append(index)
            if not active["outline"]:
                no_ring.append(controls[index])
        missed = [controls[i] for i in range(len(controls)) if i not in visited]
        assert missed == [], "Tab never reaches these controls"
        assert visited == sorted(visited), "focus order differs from reading order"
        assert no_ring == [], "focused controls without a visible focus ring"
        # The skip link comes first and moves to the main content.
        page.locator("a.skip").focus()
        page.keyboard.press("Enter")
        assert page.evaluate("() => document.activeElement.id") == "main"
        assert problems == []


# ---------------------------------------------------------------- dark scheme and print


def _chart_colours() -> dict[str, Any]:
    import tomllib

    charts: dict[str, Any] = tomllib.loads(THEME_TOML.read_text("utf-8"))["charts"]
    return charts


AXIS_LABEL = "() => document.querySelector('#vis-fit svg .role-axis-label text').getAttribute('fill')"
BACKGROUND = "() => getComputedStyle(document.body).backgroundColor"


def _luma(css_rgb: str) -> float:
    r, g, b = (float(v) for v in css_rgb[css_rgb.index("(") + 1 : css_rgb.index(")")].split(",")[:3])
    return (0.2126 * r + 0.7152 * g + 0.0722 * b) / 255


def test_dark_scheme_renders_and_charts_follow_the_theme(browser: Any, site: Path, shots: Path) -> None:
    colours = _chart_colours()
    with watched(browser, site, color_scheme="dark") as (page, problems):
        _open(page, site, "index.html")
        assert _luma(page.evaluate(BACKGROUND)) < 0.2
        assert _chart_problems(page) == []
        page.screenshot(path=str(shots / "index-dark.png"), full_page=True)

        _open(page, site, f"datasets/{SHOWCASE}/index.html")
        assert _luma(page.evaluate(BACKGROUND)) < 0.2
        assert _chart_problems(page) == []
        assert page.evaluate(AXIS_LABEL) == colours["dark"]["text"]
        page.screenshot(path=str(shots / "dataset-dark.png"), full_page=True)

        # The reader switches to light: the charts are drawn again in light colours.
        page.emulate_media(color_scheme="light")
        page.wait_for_function(f"() => ({AXIS_LABEL.removeprefix('() => ')}) === '{colours['light']['text']}'")
        assert _luma(page.evaluate(BACKGROUND)) > 0.8
        assert _chart_problems(page) == []
        assert problems == []


def test_print_media_gives_black_on_white_without_controls(browser: Any, site: Path, shots: Path) -> None:
    colours = _chart_colours()
    with watched(browser, site, color_scheme="dark") as (page, problems):
        _open(page, site, f"datasets/{SHOWCASE}/index.html")
        page.emulate_media(media="print")
        # Paper is white: charts drawn for the dark screen are drawn again in light colours.
        page.wait_for_function(f"() => ({AXIS_LABEL.removeprefix('() => ')}) === '{colours['light']['text']}'")
        assert _luma(page.evaluate(BACKGROUND)) > 0.95
        assert not page.locator(".masthead nav").is_visible()
        assert not page.locator(".prevnext").is_visible()
        assert page.locator(".caution").is_visible()
        assert _chart_problems(page) == []
        page.screenshot(path=str(shots / "dataset-print.png"), full_page=True)

        _open(page, site, "index.html")
        assert not page.locator("form.filters").is_visible()
        assert page.locator("#datasets").is_visible()
        page.screenshot(path=str(shots / "index-print.png"), full_page=True)
        pdf = page.pdf(format="A4")
        assert pdf.startswith(b"%PDF")
        (shots.parent / "index-print.pdf").write_bytes(pdf)
        assert problems == []


# ---------------------------------------------------------------- a large dataset


LARGE_ROWS = 30_000


@pytest.fixture(scope="module")
def large_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("large")
    data = base / "data"
    data.mkdir()
    rng = np.random.default_rng(7)
    x = rng.uniform(0.0, 40.0, LARGE_ROWS)
    y = 0.15 + 1.04 * x + rng.normal(0.0, 0.2 + 0.01 * x)
    y[rng.choice(LARGE_ROWS, 40, replace=False)] += 6.0  # a few gross errors to flag
    lines = ["reference,online", *(f"{a:.4f},{b:.4f}" for a, b in zip(x, y, strict=True))]
    (data / "online_turbidity.csv").write_text("\n".join(lines) + "\n", "utf-8")
    (data / "online_turbidity.toml").write_text('title = "Online turbidity, a month of readings"\n', "utf-8")
    # Beside it, a file that cannot be fitted and a very small one: the site is written, exit status 1.
    (data / "broken.csv").write_text("a,b\n1,x\n2,y\n3,z\n", "utf-8")
    (data / "tiny.csv").write_text("a,b\n1,2\n2,4.1\n3,5.9\n4,8.2\n5,9.9\n", "utf-8")
    return _build(data, base / "site", status=1)


def test_a_site_with_a_failed_dataset_opens_cleanly(browser: Any, large_site: Path) -> None:
    report = {}
    with watched(browser, large_site) as (page, problems):
        for rel in _pages(large_site):
            _open(page, large_site, rel)
            if found := problems + _chart_problems(page):
                report[rel] = found
            problems.clear()
        _open(page, large_site, "datasets/broken/index.html")
        assert page.get_by_role("heading", name="This dataset could not be fitted").is_visible()
        assert page.locator(".vis").count() == 0
        _open(page, large_site, "index.html")
        page.locator("form.filters").get_by_label("Status").select_option("error")
        assert _shown(page) == ["broken"]
    assert report == {}


def test_a_large_dataset_page_is_small_and_draws(browser: Any, large_site: Path, shots: Path) -> None:
    rel = "datasets/online-turbidity/index.html"
    page_file = large_site / rel
    assert page_file.stat().st_size < 2_000_000
    with watched(browser, large_site) as (page, problems):
        _open(page, large_site, rel)
        assert _chart_problems(page) == []
        note = page.locator("p.sampled")
        assert note.is_visible()
        assert f"{LARGE_ROWS:,}" in note.inner_text()
        cells = page.locator("#vis-fit svg g.mark-rect.role-mark > path").count()
        points = page.locator("#vis-fit svg g.mark-symbol.role-mark > path").count()
        assert cells > 0, "the density layer is drawn"
        assert 0 < points < LARGE_ROWS
        page.locator("#fig-fit").screenshot(path=str(shots / "dataset-large-chart.png"))
        assert problems == []


def test_single_file_report_opens_cleanly_and_draws_every_chart(browser: Any, site: Path, tmp_path: Path) -> None:
    """`sitegen pack SITE -o report.html`: one file, nothing loaded from anywhere, every chart drawn."""
    from conftest import cli

    out = tmp_path / "mail"
    out.mkdir()
    report = out / "report.html"
    res = cli("pack", site, "-o", report)
    assert res.code == 0, res.output
    assert sorted(p.name for p in out.iterdir()) == ["report.html"]
    with watched(browser, out) as (page, problems):
        _open(page, out, "report.html")
        assert _chart_problems(page) == []
        sections = page.locator("article.dataset").count()
        assert sections == len(_summary(site))
        duplicates = page.evaluate(
            "() => { const ids = [...document.querySelectorAll('[id]')].map(e => e.id);"
            " return ids.filter((v, i) => ids.indexOf(v) !== i); }"
        )
        assert duplicates == []
        # Links inside the file lead to its own sections.
        first = _summary(site)[0]["dataset"]
        page.click(f'a[href="#ds-{first}"] >> nth=0')
        assert page.evaluate("() => location.hash") == f"#ds-{first}"
    assert problems == []
