"""Themes: colour contrast of the default theme, its page structure, and a user theme in a real build.

Contrast follows the WCAG 2.1 definitions (W3C Recommendation, "relative luminance" and
"contrast ratio"): AA asks for 4.5:1 for body text and 3:1 for graphical objects and focus
indicators (success criteria 1.4.3 and 1.4.11).
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
import tomllib
from html.parser import HTMLParser
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
THEME = ROOT / "themes" / "default"
CSS = (THEME / "static" / "style.css").read_text("utf-8")
CAUTION = "Use with care."

# ---------------------------------------------------------------- contrast


def _luminance(colour: str) -> float:
    """Relative luminance of an sRGB colour ``#rrggbb`` (WCAG 2.1 definition)."""
    h = colour.lstrip("#")
    assert len(h) == 6, colour

    def channel(v: float) -> float:
        return v / 12.92 if v <= 0.04045 else ((v + 0.055) / 1.055) ** 2.4

    r, g, b = (channel(int(h[i : i + 2], 16) / 255) for i in (0, 2, 4))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def contrast(a: str, b: str) -> float:
    """WCAG contrast ratio (L1 + 0.05) / (L2 + 0.05), lighter over darker."""
    hi, lo = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


def test_contrast_function_matches_known_values() -> None:
    assert contrast("#000000", "#ffffff") == pytest.approx(21.0)  # the WCAG maximum, by definition
    assert contrast("#ffffff", "#ffffff") == pytest.approx(1.0)
    # From memory (widely quoted): #767676 on white is about 4.54:1, the lightest grey that passes AA.
    assert contrast("#767676", "#ffffff") == pytest.approx(4.54, abs=0.01)
    assert contrast("#777777", "#ffffff") < 4.5


def _block(css: str, opener: str) -> str:
    """The text of the first ``:root { … }`` after ``opener`` (braces balanced)."""
    start = css.index(opener)
    root = css.index(":root", start)
    depth, i = 0, css.index("{", root)
    begin = i
    while True:
        if css[i] == "{":
            depth += 1
        elif css[i] == "}":
            depth -= 1
            if depth == 0:
                return css[begin + 1 : i]
        i += 1


def _variables(block: str) -> dict[str, str]:
    return {m.group(1): m.group(2).lower() for m in re.finditer(r"--([a-z-]+):\s*(#[0-9a-fA-F]{6})\b", block)}


LIGHT = _variables(_block(CSS, ":root"))
SCHEMES = {
    "light": LIGHT,
    "dark": LIGHT | _variables(_block(CSS, "@media (prefers-color-scheme: dark)")),
    "print": LIGHT | _variables(_block(CSS, "@media print")),
}

# (foreground, background, where the pair is used)
TEXT_PAIRS = [
    ("ink", "paper", "body text"),
    ("ink", "panel", "text in tables, panels and chart figures"),
    ("ink", "head", "table headings"),
    ("ink", "accent-soft", "tags, code, the large-dataset note"),
    ("ink", "warn-bg", "the caution notice"),
    ("muted", "paper", "sublines, footer, notes"),
    ("muted", "panel", "captions, figure captions, legends in panels"),
    ("muted", "head", "sort arrows in table headings"),
    ("accent", "paper", "links"),
    ("accent", "panel", "links in panels and captions"),
    ("accent", "accent-soft", "links on tinted rows"),
    ("ok-ink", "ok-bg", "'sound' badges"),
    ("warn-ink", "warn-bg", "'check' badges and flagged verdict marks"),
    ("err-ink", "err-bg", "'failed' badges and error panels"),
    ("warn-ink", "panel", "warning labels and moved estimates"),
]


@pytest.mark.parametrize("scheme", sorted(SCHEMES))
@pytest.mark.parametrize(("fg", "bg", "use"), TEXT_PAIRS, ids=[f"{f}-on-{b}" for f, b, _ in TEXT_PAIRS])
def test_text_colours_meet_wcag_aa(scheme: str, fg: str, bg: str, use: str) -> None:
    colours = SCHEMES[scheme]
    ratio = contrast(colours[fg], colours[bg])
    assert ratio >= 4.5, f"{scheme}: --{fg} on --{bg} ({use}) is {ratio:.2f}:1"


@pytest.mark.parametrize("scheme", sorted(SCHEMES))
def test_focus_ring_is_visible(scheme: str) -> None:
    colours = SCHEMES[scheme]
    for bg in ("paper", "panel"):
        assert contrast(colours["focus"], colours[bg]) >= 3.0  # non-text contrast (1.4.11)


def test_dark_scheme_sets_every_colour_of_the_light_one() -> None:
    dark = _variables(_block(CSS, "@media (prefers-color-scheme: dark)"))
    assert set(dark) == set(LIGHT) - {"font", "mono"}


CHART = tomllib.loads((THEME / "theme.toml").read_text("utf-8"))["charts"]


@pytest.mark.parametrize("scheme", ["light", "dark"])
def test_chart_colours_meet_wcag_aa(scheme: str) -> None:
    c = CHART[scheme]
    panel = SCHEMES[scheme]["panel"]
    assert contrast(c["text"], panel) >= 4.5  # axis and legend labels
    assert contrast(c["muted"], panel) >= 4.5
    for name in ("mark", "flag", "domain"):
        assert contrast(c[name], panel) >= 3.0, name  # points, lines and axes are graphical objects
    for colour in c["category"]:
        assert contrast(colour, panel) >= 3.0, colour
    assert c["mark"] != c["flag"]


def test_site_script_falls_back_to_the_same_chart_colours() -> None:
    """site.js carries the default chart colours for themes whose theme.toml leaves some out."""
    js = (THEME / "static" / "site.js").read_text("utf-8")
    for scheme in ("light", "dark"):
        for key, value in CHART[scheme].items():
            if isinstance(value, list):
                assert json.dumps(value) in js, (scheme, key)
            else:
                assert f'{key}: "{value}"' in js, (scheme, key)


def test_print_rules_hide_controls_and_keep_charts_whole() -> None:
    rules = CSS[CSS.index("@media print") :]
    for selector in (".masthead nav", ".filters", ".skip", ".prevnext"):
        assert selector in rules.split("display: none")[0]
    assert "break-inside: avoid" in rules


# ---------------------------------------------------------------- page structure of a real build


def build(data: Path, out: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(out), "--quiet"],
        capture_output=True,
        text=True,
        check=False,
        cwd=ROOT,
    )


@pytest.fixture(scope="module")
def example_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("themes") / "site"
    done = build(ROOT / "example_project", out)
    assert done.returncode == 0, done.stderr
    return out


class _Outline(HTMLParser):
    """Headings, ids, label references, figures and the footer of one page."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.headings: list[int] = []
        self.ids: list[str] = []
        self.labelledby: list[str] = []
        self.lang = ""
        self.in_footer = False
        self.footer_text = ""
        self.links: list[str] = []
        self.figures = 0
        self.captions = 0
        self.vis_labels: list[str] = []
        self.tags: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        self.tags.append(tag)
        if tag == "html":
            self.lang = a.get("lang", "")
        if re.fullmatch(r"h[1-6]", tag):
            self.headings.append(int(tag[1]))
        if "id" in a:
            self.ids.append(a["id"])
        if "aria-labelledby" in a:
            self.labelledby += a["aria-labelledby"].split()
        if tag == "footer":
            self.in_footer = True
        if tag == "a" and "href" in a:
            self.links.append(a["href"])
        if tag == "figure":
            self.figures += 1
        if tag == "figcaption":
            self.captions += 1
        if "vis" in a.get("class", "").split():
            self.vis_labels.append(a.get("aria-label", "") if a.get("role") == "img" else "")

    def handle_endtag(self, tag: str) -> None:
        if tag == "footer":
            self.in_footer = False

    def handle_data(self, data: str) -> None:
        if self.in_footer:
            self.footer_text += data


def _outline(page: Path) -> _Outline:
    parser = _Outline()
    parser.feed(page.read_text("utf-8"))
    parser.close()
    return parser


def _pages(site: Path) -> list[Path]:
    return sorted(site.rglob("*.html"))


def test_every_page_is_well_outlined(example_site: Path) -> None:
    pages = _pages(example_site)
    assert len(pages) == 2 + len(list((example_site / "datasets").iterdir()))
    for page in pages:
        o = _outline(page)
        name = page.relative_to(example_site).as_posix()
        assert o.lang == "en", name
        assert o.headings.count(1) == 1, f"{name}: one h1"
        assert o.headings[0] == 1, name
        jumps = [(a, b) for a, b in zip(o.headings, o.headings[1:], strict=False) if b > a + 1]
        assert jumps == [], f"{name}: heading levels skipped {jumps}"
        assert len(o.ids) == len(set(o.ids)), f"{name}: duplicate ids"
        assert set(o.labelledby) <= set(o.ids), f"{name}: aria-labelledby points nowhere"
        for landmark in ("header", "nav", "main", "footer"):
            assert landmark in o.tags, f"{name}: no <{landmark}>"


def test_every_page_has_the_caution_notice_in_its_footer(example_site: Path) -> None:
    for page in _pages(example_site):
        footer = " ".join(_outline(page).footer_text.split())
        assert CAUTION in footer, page
        assert "does not replace them" in footer, page


def test_every_page_links_to_the_index_and_the_change_report(example_site: Path) -> None:
    for page in _pages(example_site):
        links = {Path(href).name for href in _outline(page).links}
        assert {"index.html", "changes.html"} <= links, page


def test_every_chart_has_a_caption_and_a_text_alternative(example_site: Path) -> None:
    for page in _pages(example_site):
        html = page.read_text("utf-8")
        o = _outline(page)
        assert o.figures == o.captions, page
        assert all(len(label) > 30 for label in o.vis_labels), f"{page}: a chart without a descriptive label"
        for figure in re.findall(r'<figure class="chart.*?</figure>', html, re.S):
            has_numbers = 'class="data-link"' in figure or "<details" in figure
            assert has_numbers, f"{page}: a chart without a link or toggle to its numbers"


def test_dataset_pages_have_breadcrumb_and_neighbours(example_site: Path) -> None:
    pages = sorted((example_site / "datasets").glob("*/index.html"))
    nexts: dict[str, str] = {}
    prevs: dict[str, str] = {}
    for page in pages:
        html = page.read_text("utf-8")
        slug = page.parent.name
        assert 'aria-label="Breadcrumb"' in html
        assert '<li aria-current="page">' in html
        for rel, found in (("next", nexts), ("prev", prevs)):
            m = re.search(rf'<a rel="{rel}" href="\.\./([^/"]+)/index\.html"', html)
            if m:
                assert (example_site / "datasets" / m.group(1) / "index.html").is_file()
                found[slug] = m.group(1)
    # The links form one chain through every dataset, the same both ways.
    assert len(nexts) == len(prevs) == len(pages) - 1
    assert {b: a for a, b in nexts.items()} == prevs


def test_status_is_never_told_by_colour_alone(example_site: Path) -> None:
    html = (example_site / "index.html").read_text("utf-8")
    badges = re.findall(
        r'<span class="badge badge-(\w+)"><span class="badge-mark" aria-hidden="true">(.)</span> '
        r"(\w+)</span>",
        html,
    )
    assert badges
    words = {"ok": ("✓", "sound"), "warn": ("!", "check"), "error": ("✕", "failed")}
    assert all(words[status] == (symbol, word) for status, symbol, word in badges)


# ---------------------------------------------------------------- a user theme


USER_CSS = "/* brand theme */\nbody { font-family: Georgia, serif; }\n.brand-bar { padding: .5rem; }\n"
BANNER = '<div class="brand-bar">Water laboratory intranet</div>'
# One section of the dataset page replaced; it reads the same typed fields as the default one.
ESTIMATES = (
    '<section aria-labelledby="h-brand-est"><h2 id="h-brand-est">Slope and intercept, lab style</h2>\n'
    "<p>{% for c in r.coefficients %}{{ c.term }} = {{ c.estimate | num(4) }}; {% endfor %}</p></section>\n"
)


@pytest.fixture(scope="module")
def user_theme_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("user-theme")
    data = base / "data"
    for folder, name in (("calibration", "nitrate_uv"), ("field", "chlorine_kit_vs_lab")):
        (data / folder).mkdir(parents=True, exist_ok=True)
        for ext in ("csv", "toml"):
            shutil.copyfile(ROOT / "example_project" / folder / f"{name}.{ext}", data / folder / f"{name}.{ext}")
    theme = data / "_brand"
    (theme / "templates").mkdir(parents=True)
    (theme / "static").mkdir()
    default_base = (THEME / "templates" / "base.html").read_text("utf-8")
    assert "<body" in default_base
    user_base = re.sub(r"(<body[^>]*>)", r"\1\n" + BANNER, default_base, count=1)
    (theme / "templates" / "base.html").write_text(user_base, "utf-8")
    (theme / "static" / "style.css").write_text(USER_CSS, "utf-8")
    (theme / "templates" / "sections").mkdir()
    (theme / "templates" / "sections" / "estimates.html").write_text(ESTIMATES, "utf-8")
    (theme / "theme.toml").write_text('[charts.light]\nmark = "#8b1e3f"\n', "utf-8")
    (data / "site.toml").write_text('title = "Branded"\ntheme = "_brand"\n', "utf-8")
    out = base / "site"
    done = build(data, out)
    assert done.returncode == 0, done.stderr
    return out


def test_user_template_overrides_the_default(user_theme_site: Path) -> None:
    pages = _pages(user_theme_site)
    assert len(pages) == 4  # index, change report, two datasets
    for page in pages:
        html = page.read_text("utf-8")
        assert BANNER in html, page
        assert CAUTION in html, page
    dataset = next((user_theme_site / "datasets").glob("*/index.html")).read_text("utf-8")
    assert "Can this line be trusted?" in dataset  # the default dataset template still applies


def test_user_theme_replaces_one_section_and_keeps_the_others(user_theme_site: Path) -> None:
    for page in sorted((user_theme_site / "datasets").glob("*/index.html")):
        html = page.read_text("utf-8")
        assert "Slope and intercept, lab style" in html, page
        assert re.search(r"Intercept = -?[0-9.]+; ", html), page
        assert 'id="h-est"' not in html, page  # the default estimates section is gone
        for kept in ("Can this line be trusted?", "Where the variation in", "Downloads"):
            assert kept in html, (page, kept)


def test_user_stylesheet_replaces_the_default_and_the_script_stays(user_theme_site: Path) -> None:
    assets = user_theme_site / "assets"
    assert (assets / "style.css").read_text("utf-8") == USER_CSS
    assert (assets / "site.js").read_bytes() == (THEME / "static" / "site.js").read_bytes()


def test_user_chart_colours_are_merged_over_the_default(user_theme_site: Path) -> None:
    html = (user_theme_site / "index.html").read_text("utf-8")
    found = re.search(r'<script type="application/json" id="chart-theme">(.*?)</script>', html, re.S)
    assert found
    colours = json.loads(found.group(1))
    assert colours["light"]["mark"] == "#8b1e3f"
    assert colours["dark"] == CHART["dark"]  # untouched scheme comes from the default theme


def test_static_images_are_written_and_offered(tmp_path: Path) -> None:
    """static_images = true: every chart of a page also as an SVG file, listed in the downloads."""
    from conftest import EXAMPLE, cli

    data = tmp_path / "data"
    shutil.copytree(EXAMPLE / "field", data / "field")
    (data / "site.toml").write_text('title = "images"\nstatic_images = true\n', encoding="utf-8")
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    folder = out / "datasets" / "field-nitrate-kit-vs-lab"
    svgs = sorted(p.name for p in folder.glob("chart-*.svg"))
    assert svgs == [
        "chart-fit.svg",
        "chart-pull.svg",
        "chart-residual-by-x.svg",
        "chart-residual-order.svg",
        "chart-shape.svg",
    ]
    for name in svgs:
        text = (folder / name).read_text(encoding="utf-8")
        assert text.lstrip().startswith("<svg")
        assert "<path" in text
        assert "http://" not in text.replace("http://www.w3.org", "")
    page = (folder / "index.html").read_text(encoding="utf-8")
    assert 'href="chart-fit.svg"' in page


def test_a_broken_user_template_is_named_with_its_line(tmp_path: Path) -> None:
    """A typo in a user theme is a configuration error naming the file and line (exit 2), not an internal error."""
    from conftest import cli

    data = tmp_path / "data"
    (data / "mytheme" / "templates").mkdir(parents=True)
    (data / "a.csv").write_text("x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n", encoding="utf-8")
    (data / "site.toml").write_text('theme = "mytheme"\n', encoding="utf-8")
    (data / "mytheme" / "templates" / "index.html").write_text(
        '{% extends "base.html" %}\n{% block main %}\n{{ oops( }}\n{% endblock %}\n', encoding="utf-8"
    )
    out = tmp_path / "site"
    res = cli("build", data, "-o", out, "-j", "1")
    assert res.code == 2
    assert "index.html" in res.stream
    assert "line 3" in res.stream
    assert "internal error" not in res.stream
    assert not out.exists()
