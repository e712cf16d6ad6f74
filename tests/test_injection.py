"""Hostile text in a data folder comes out inert: in HTML, in JSON embedded in pages, in CSV and XLSX.

The data folder is written by the test: a site title and description, dataset
titles, descriptions, tags, units, column names, file names and cell values that
try to break out of HTML, out of ``<script>`` blocks, out of links, and into
spreadsheet formulas. Then the site built by the real CLI is read back:

* every page is parsed with :mod:`html.parser`: the only ``<script>`` elements
  are the site's own (files under ``assets/`` and ``application/json`` data
  blocks), no element carries an event-handler attribute, no link or source uses
  a ``javascript:``, ``data:`` or ``vbscript:`` scheme, and the hostile text is
  present in its escaped form (so it was shown, not dropped);
* every ``<script type="application/json">`` block parses as JSON and holds no
  ``</script`` (nor any ``<``) in its raw text;
* every text cell of every CSV and XLSX file the site offers that starts with
  ``=``, ``+``, ``-``, ``@``, tab or carriage return carries a leading single
  quote (common practice against spreadsheet formula injection; OWASP "CSV
  Injection"), while numbers stay numbers: negative estimates are plain numeric
  cells in CSV and numeric cells in XLSX.
"""

from __future__ import annotations

import csv
import json
import math
import re
from html.parser import HTMLParser
from pathlib import Path

import pytest
from openpyxl import load_workbook
from test_corpus import CONTROL, CONTROL_SLUG, assert_clean_output, assert_site_sound, run

BREAKOUT = "</script><script>alert(1)</script>"
DANGEROUS_STARTS = ("=", "+", "-", "@", "\t", "\r")
BAD_SCHEMES = ("javascript:", "data:", "vbscript:")

SITE_TOML = f'''
title = "{BREAKOUT}"
description = """
Raw HTML: <script>alert('desc')</script> <img src=x onerror=alert('img')>
<a href="javascript:alert(2)">raw</a>

Links: [js](javascript:alert('js')) [JS](JaVaScRiPt:alert('JS')) [data](data:text/html;base64,PHNjcmlwdD4=)
[vb](vbscript:msgbox('vb')) [entity](&#106;avascript:alert('ent')) [ok](https://example.org/fine)
![pic](data:image/svg+xml;base64,PHN2Zz4=) [ref][r]

[r]: vbscript:msgbox('ref')
"""
'''

# One predictor named with a script break-out, a response named like a formula; y falls as x rises,
# so the slope, several residuals and interval ends are negative numbers.
HOSTILE_X = "</script><b onmouseover=alert('x')>dose"
HOSTILE_Y = '=HYPERLINK("http://evil.example","y")'
ROWS = [(1, 9.1), (2, 8.2), (3, 6.8), (4, 6.1), (5, 4.9), (6, 4.2), (7, 2.8), (8, 2.1), (9, 0.9), (10, -0.2)]
HOSTILE_CSV = '"' + HOSTILE_X + '","' + HOSTILE_Y.replace('"', '""') + '"\n' + "".join(f"{x},{y}\n" for x, y in ROWS)
MODEL = f"Q({HOSTILE_Y!r}) ~ Q({HOSTILE_X!r})"
HOSTILE_TOML = "\n".join(
    [
        f"title = {json.dumps(BREAKOUT)}",
        "description = "
        + json.dumps("See [here](javascript:alert('d')) and <iframe src='javascript:alert(3)'></iframe>"),
        "tags = " + json.dumps(["=SUM(A1:A9)", "<script>alert('tag')</script>", "-2+3", "@cmd", "+1"]),
        f"model = {json.dumps(MODEL)}",
        f"units = {{ {json.dumps(HOSTILE_X)} = {json.dumps('<b>mg/L</b>')} }}",
        "",
    ]
)
FORMULA_TITLES = {
    "tab_title": "\t=1+1",
    "cr_title": "\r=1+1",
    "plus_title": "+1+1",
    "at_title": "@SUM(1,1)",
    "minus_title": "-1+1",
}


class _Page(HTMLParser):
    """Collects what matters for injection: elements, attributes, script blocks."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.scripts: list[tuple[dict[str, str | None], str]] = []
        self._in_script: dict[str, str | None] | None = None
        self._script_text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, dict(attrs)))
        if tag == "script":
            self._in_script, self._script_text = dict(attrs), []

    def handle_endtag(self, tag: str) -> None:
        if tag == "script" and self._in_script is not None:
            self.scripts.append((self._in_script, "".join(self._script_text)))
            self._in_script = None

    def handle_data(self, data: str) -> None:
        if self._in_script is not None:
            self._script_text.append(data)


def _url_scheme_is_bad(url: str) -> bool:
    # Browsers ignore leading/embedded ASCII whitespace and control characters when reading a scheme.
    squeezed = re.sub(r"[\x00-\x20]", "", url).lower()
    return squeezed.startswith(BAD_SCHEMES)


@pytest.fixture(scope="module")
def hostile_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    tmp = tmp_path_factory.mktemp("hostile")
    data = tmp / "data"
    data.mkdir()
    (data / CONTROL.name).write_bytes(CONTROL.read_bytes())
    (data / "site.toml").write_text(SITE_TOML, encoding="utf-8")
    (data / "hostile.csv").write_text(HOSTILE_CSV, encoding="utf-8")
    (data / "hostile.toml").write_text(HOSTILE_TOML, encoding="utf-8")
    # A file name that is markup, and one that is a formula; the second is empty, so its error
    # message starts with the file name.
    (data / "<img src=x onerror=alert('file')>.csv").write_bytes(CONTROL.read_bytes())
    (data / "=cmd|' calc'!A0.csv").write_bytes(b"")
    (data / "-2+3.csv").write_bytes(b"")
    # A cell that is markup: reported (quoted) in the error message.
    (data / "cell.csv").write_text("x,y\n1,2\n2,<script>alert('cell')</script>\n3,4\n", encoding="utf-8")
    for name, title in FORMULA_TITLES.items():
        (data / f"{name}.csv").write_bytes(CONTROL.read_bytes())
        (data / f"{name}.toml").write_text(
            f"title = {json.dumps(title)}\ntags = [{json.dumps(title)}]\n", encoding="utf-8"
        )
    site = tmp / "site"
    result = run(data, site)
    assert_clean_output(result)
    assert result.code == 1, result.output  # the empty files fail; everything else is built
    rows = assert_site_sound(site)
    assert rows[CONTROL_SLUG]["status"] == "ok"
    assert rows["hostile"]["status"] in ("ok", "warn"), rows["hostile"]
    assert rows["cell"]["status"] == "error"
    return site


def _pages(site: Path) -> list[Path]:
    pages = sorted(site.rglob("*.html"))
    assert len(pages) >= 12
    return pages


def test_pages_have_only_their_own_scripts_and_no_handlers_or_bad_links(hostile_site: Path) -> None:
    for page in _pages(hostile_site):
        parser = _Page()
        parser.feed(page.read_text(encoding="utf-8"))
        parser.close()
        for tag, attrs in parser.tags:
            handlers = [a for a in attrs if a.startswith("on")]
            assert not handlers, f"{page}: <{tag}> has event handler(s) {handlers}"
            assert tag not in ("iframe", "object", "embed", "img", "b"), f"{page}: injected <{tag}>"
            for key in ("href", "src", "action", "formaction", "xlink:href", "srcdoc"):
                value = attrs.get(key)
                if value is not None:
                    assert not _url_scheme_is_bad(value), f"{page}: <{tag} {key}={value!r}>"
        for attrs, text in parser.scripts:
            if attrs.get("type") == "application/json":
                continue
            assert not text.strip(), f"{page}: inline script {text[:80]!r}"
            src = attrs.get("src") or ""
            assert re.fullmatch(r"(\.\./\.\./)?assets/[\w./-]+\.js", src), f"{page}: script src {src!r}"


def test_hostile_text_is_shown_escaped(hostile_site: Path) -> None:
    # Jinja writes ' as &#39;, markdown-it leaves it: compare with ' throughout.
    index = (hostile_site / "index.html").read_text(encoding="utf-8").replace("&#39;", "'")
    page = (hostile_site / "datasets" / "hostile" / "index.html").read_text(encoding="utf-8").replace("&#39;", "'")
    escaped = "&lt;/script&gt;&lt;script&gt;alert(1)&lt;/script&gt;"
    assert escaped in index  # site title
    assert escaped in page  # dataset title
    assert BREAKOUT not in index
    assert BREAKOUT not in page
    assert "&lt;script&gt;alert('desc')&lt;/script&gt;" in index  # raw HTML in Markdown is text
    assert 'href="https://example.org/fine"' in index  # a harmless link survives
    assert "&lt;b onmouseover=alert('x')&gt;dose" in page  # the column name, as text
    cell_page = (hostile_site / "datasets" / "cell" / "index.html").read_text(encoding="utf-8")
    assert "&lt;script&gt;alert(" in cell_page  # the bad cell is quoted in the error, as text
    file_page = (hostile_site / "datasets" / "img-src-x-onerror-alert-file" / "index.html").read_text("utf-8")
    assert "&lt;img src=x onerror=alert('file')&gt;.csv" in file_page.replace("&#39;", "'")


def test_json_blocks_in_pages_are_valid_and_cannot_end_the_script(hostile_site: Path) -> None:
    carried = False
    for page in _pages(hostile_site):
        parser = _Page()
        parser.feed(page.read_text(encoding="utf-8"))
        for attrs, text in parser.scripts:
            if attrs.get("type") != "application/json":
                continue
            assert "</script" not in text.lower(), page
            assert "<" not in text, page
            json.loads(text)
            # The hostile names reach the charts (axis titles, forest-plot labels) as data, escaped.
            carried = carried or HOSTILE_X in text.replace("\\u003c", "<").replace("\\u003e", ">")
    assert carried, "the hostile column name was expected inside a chart spec"


def _csv_files(site: Path) -> list[Path]:
    files = sorted(site.rglob("*.csv"))
    assert {"summary.csv", "coefficients.csv", "observations.csv"} <= {f.name for f in files}
    return files


def _is_number(text: str) -> bool:
    try:
        return math.isfinite(float(text))
    except ValueError:
        return False


def test_csv_text_cells_are_neutralised_and_numbers_stay_numbers(hostile_site: Path) -> None:
    negatives = 0
    for path in _csv_files(hostile_site):
        if path.name.startswith("source-"):
            continue  # the original data file, offered as delivered (not offered in this site)
        with path.open(encoding="utf-8", newline="") as fh:
            for row in csv.reader(fh):
                for cell in row:
                    if cell.startswith(DANGEROUS_STARTS):
                        # Only numbers may start so: "-0.25", never text such as "-2+3" or "=cmd".
                        assert _is_number(cell), f"{path}: text cell {cell!r} is not neutralised"
                        negatives += cell.startswith("-")
    assert negatives > 0, "negative numbers are written as plain numbers"
    with (hostile_site / "summary.csv").open(encoding="utf-8", newline="") as fh:
        summary = list(csv.DictReader(fh))
    by_slug = {r["dataset"]: r for r in summary}
    assert by_slug["hostile"]["title"] == BREAKOUT  # starts with "<": harmless in a spreadsheet, left as is
    assert by_slug["hostile"]["tags"].startswith("'=SUM(A1:A9)")
    assert float(by_slug["hostile"]["estimate"]) < 0  # the slope: a number, not text
    assert by_slug["cmd-calc-a0"]["source"] == "'=cmd|' calc'!A0.csv"
    assert by_slug["cmd-calc-a0"]["title"] == "'=cmd|' calc'!A0"
    assert by_slug["cmd-calc-a0"]["message"].startswith("'=cmd|' calc'!A0.csv is empty")
    assert by_slug["2-3"]["title"] == "'-2+3"
    for name, title in FORMULA_TITLES.items():
        # A bare CR inside a cell is written as LF, so that the cell is quoted (see report/tables.py).
        assert by_slug[name.replace("_", "-")]["title"] == "'" + title.replace("\r", "\n")
        assert by_slug[name.replace("_", "-")]["tags"] == "'" + title.strip()  # tags are trimmed
    with (hostile_site / "datasets" / "hostile" / "observations.csv").open(encoding="utf-8", newline="") as fh:
        header = next(csv.reader(fh))
    assert "'" + HOSTILE_Y in header
    assert HOSTILE_X in header


def test_xlsx_text_cells_are_neutralised_and_numbers_stay_numbers(hostile_site: Path) -> None:
    books = sorted(hostile_site.rglob("*.xlsx"))
    assert {"summary.xlsx", "tables.xlsx"} <= {b.name for b in books}
    negatives = 0
    texts: set[str] = set()
    for book in books:
        wb = load_workbook(book)
        for sheet in wb.worksheets:
            for row in sheet.iter_rows():
                for cell in row:
                    assert cell.data_type != "f", f"{book}: formula cell {cell.coordinate}"
                    if isinstance(cell.value, str):
                        texts.add(cell.value)
                        assert not cell.value.startswith(DANGEROUS_STARTS), f"{book}: {cell.value!r}"
                    elif isinstance(cell.value, int | float) and not isinstance(cell.value, bool):
                        negatives += cell.value < 0
        wb.close()
    assert negatives > 0, "negative numbers are numeric cells"
    assert "'" + HOSTILE_Y in texts
    assert "'=cmd|' calc'!A0.csv" in texts
    assert "'\t=1+1" in texts
    # The summary's numeric columns hold numbers, not text.
    wb = load_workbook(hostile_site / "summary.xlsx")
    sheet = wb.worksheets[0]
    header = [c.value for c in next(sheet.iter_rows(max_row=1))]
    hostile_row = next(r for r in sheet.iter_rows(min_row=2, values_only=True) if r[0] == "hostile")
    for column in ("n", "df_resid", "r_squared", "estimate", "ci_low", "ci_high", "level"):
        value = hostile_row[header.index(column)]
        assert isinstance(value, int | float), (column, value)
        assert not isinstance(value, bool), (column, value)
    assert hostile_row[header.index("estimate")] < 0
    wb.close()
