"""A small, fast XLSX writer for plain tables (a sheet per table, numbers and text).

openpyxl costs about 20 µs per cell, which made workbooks the slowest part of a
build; a table needs only a handful of fixed XML parts, written here directly.
Text is stored as inline strings (never formulas); the tests read every
workbook back with openpyxl. Timestamps are fixed so builds are reproducible.
"""

from __future__ import annotations

import io
import math
import re
import zipfile
from collections.abc import Iterable, Sequence

_FIXED_TIME = (2000, 1, 1, 0, 0, 0)
_NUMBERS = frozenset((float, int, type(None)))
_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_PKG_REL = "http://schemas.openxmlformats.org/package/2006/relationships"
_SHEET_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"
_XML_HEAD = '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
_ROOT_RELS = (
    f'{_XML_HEAD}<Relationships xmlns="{_PKG_REL}">'
    f'<Relationship Id="rId1" Type="{_REL}/officeDocument" Target="xl/workbook.xml"/></Relationships>'
)


class CsvLines(str):
    """A table's rows as the CSV writer wrote them (LF ends, no quoted cells): ``numbers`` columns
    of numbers or empty cells, then text columns.

    The CSV writer has already turned each number into its shortest round-trip text; a sheet is
    made from these lines by string replacement instead of formatting every cell again.
    """

    __slots__ = ("numbers", "width")
    numbers: int
    width: int

    def __new__(cls, text: str, numbers: int, width: int) -> CsvLines:
        self = super().__new__(cls, text)
        self.numbers, self.width = numbers, width
        return self


#: A table for a workbook: (sheet name, header, rows or their CSV lines).
Sheet = tuple[str, Sequence[str], Sequence[Sequence[object]] | CsvLines]


def _content_types(count: int) -> str:
    sheets = "".join(
        f'<Override PartName="/xl/worksheets/sheet{i}.xml" ContentType="{_SHEET_TYPE}"/>' for i in range(1, count + 1)
    )
    return (
        f'{_XML_HEAD}<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
        '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.relationships+xml"/>'
        '<Default Extension="xml" ContentType="application/xml"/>'
        '<Override PartName="/xl/workbook.xml" '
        'ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"/>'
        f"{sheets}</Types>"
    )


def _workbook(names: Sequence[str]) -> str:
    sheets = "".join(
        f'<sheet name="{escape(_sheet_name(n)).replace(chr(34), "&quot;")}" sheetId="{i}" r:id="rId{i}"/>'
        for i, n in enumerate(names, start=1)
    )
    return f'{_XML_HEAD}<workbook xmlns="{_MAIN}" xmlns:r="{_REL}"><sheets>{sheets}</sheets></workbook>'


def _workbook_rels(count: int) -> str:
    rels = "".join(
        f'<Relationship Id="rId{i}" Type="{_REL}/worksheet" Target="worksheets/sheet{i}.xml"/>'
        for i in range(1, count + 1)
    )
    return f'{_XML_HEAD}<Relationships xmlns="{_PKG_REL}">{rels}</Relationships>'


def _sheet_name(name: str) -> str:
    """At most 31 characters, none of the ones spreadsheets refuse in a sheet name."""
    return "".join("_" if ch in "[]:*?/\\" else ch for ch in name)[:31] or "data"


def escape(text: str) -> str:
    """XML character data: &, < and > escaped (xml.sax.saxutils would import urllib and ssl for this)."""
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f]")
_INFINITE = (math.inf, -math.inf)


#: Most characters a spreadsheet cell holds (Excel's limit, in UTF-16 code units; common practice).
CELL_LIMIT = 32_767


def _illegal_free(text: str) -> str:
    # XML 1.0 forbids most control characters; drop them rather than write a broken file.
    text = _CONTROL.sub("", text)
    if len(text) <= CELL_LIMIT // 2 or len(text.encode("utf-16-le")) <= 2 * CELL_LIMIT:
        return text
    # Cut to the limit (a text over it makes spreadsheet programs refuse or repair the workbook), ending in "…".
    units = text.encode("utf-16-le")[: 2 * (CELL_LIMIT - 1)]
    return units.decode("utf-16-le", errors="ignore") + "…"


def _cell(value: object) -> str:
    # Cells carry no reference: each row writes every column in order, so positions are implicit.
    kind = type(value)
    if kind is float:
        return f"<c><v>{value!r}</v></c>" if math.isfinite(value) else "<c/>"  # type: ignore[arg-type]
    if value is None:
        return "<c/>"
    if kind is bool:
        return f'<c t="b"><v>{int(value)}</v></c>'  # type: ignore[call-overload]
    if isinstance(value, int | float):
        v = float(value)
        return f"<c><v>{value!r}</v></c>" if math.isfinite(v) else "<c/>"
    text = escape(_illegal_free(str(value)))
    if not text:
        return "<c/>"  # an empty text is an empty cell, as in the CSV
    return f'<c t="inlineStr"><is><t xml:space="preserve">{text}</t></is></c>'


def _column_cells(values: Sequence[object]) -> list[str]:
    """The cells of one column: a column of plain numbers in one pass, anything else cell by cell."""
    if _NUMBERS.issuperset(map(type, values)):
        return [
            "<c/>" if v is None or v != v or v in _INFINITE else f"<c><v>{v!r}</v></c>"  # noqa: PLR0124 - NaN test
            for v in values
        ]
    return [_cell(v) for v in values]


def _text_cell(text: str) -> str:
    return _cell(text) if text else "<c/>"


def _csv_rows(lines: CsvLines) -> str:
    k, rows = lines.numbers, []
    for r, line in enumerate(lines.split("\n")[:-1], start=2):
        numbers = "" if line == '""' else line  # '""': the CSV writer's way of writing one empty cell
        texts: list[str] = []
        if k < lines.width:
            parts = numbers.split(",")
            numbers, texts = ",".join(parts[:k]), parts[k:]
        cells = f"<c><v>{numbers.replace(',', '</v></c><c><v>')}</v></c>" if k else ""
        rows.append(f'<row r="{r}">{cells}{"".join(map(_text_cell, texts))}</row>')
    return "".join(rows).replace("<c><v></v></c>", "<c/>")  # empty number cells


def csv_lines(text: str, kinds: Sequence[str]) -> CsvLines | None:
    """The rows of a CSV text (header line first) for :func:`_sheet_xml`, when its layout allows.

    ``kinds`` names each column's kind: ``"n"`` numbers, ``"t"`` text. Numbers must come first
    and no cell may be quoted (a row that is one empty cell, written ``""``, excepted).
    """
    body = text.partition("\n")[2]
    k = len(kinds) - len("".join(kinds).lstrip("n"))
    if "t" in kinds[:k] or "n" in kinds[k:]:
        return None
    if '"' in body and any('"' in line and line != '""' for line in body.split("\n")):
        return None
    return CsvLines(body, k, len(kinds))


def _sheet_xml(header: Sequence[str], rows: Sequence[Sequence[object]] | CsvLines) -> str:
    body = [f'<row r="1">{"".join(map(_cell, header))}</row>']
    if isinstance(rows, CsvLines):
        body.append(_csv_rows(rows))
    else:
        columns = [_column_cells(col) for col in zip(*rows, strict=True)] if rows else []
        body += [f'<row r="{r}">{"".join(cells)}</row>' for r, cells in enumerate(zip(*columns, strict=True), start=2)]
    return f'{_XML_HEAD}<worksheet xmlns="{_MAIN}"><sheetData>{"".join(body)}</sheetData></worksheet>'


def workbook(sheets: Sequence[Sheet]) -> bytes:
    """An XLSX file with one sheet per table; text cells are stored as text (never formulas)."""
    names = [name for name, _, _ in sheets]
    parts = [
        ("[Content_Types].xml", _content_types(len(sheets)), zipfile.ZIP_STORED),
        ("_rels/.rels", _ROOT_RELS, zipfile.ZIP_STORED),
        ("xl/workbook.xml", _workbook(names), zipfile.ZIP_STORED),
        ("xl/_rels/workbook.xml.rels", _workbook_rels(len(sheets)), zipfile.ZIP_STORED),
    ]
    parts += [
        (f"xl/worksheets/sheet{i}.xml", _sheet_xml(header, rows), zipfile.ZIP_DEFLATED)
        for i, (_, header, rows) in enumerate(sheets, start=1)
    ]
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED, compresslevel=1) as zf:
        for name, body, how in parts:
            info = zipfile.ZipInfo(name, date_time=_FIXED_TIME)
            # The fixed parts are a few hundred bytes: stored as they are. A ZipInfo does not take the
            # archive's level, so it is given here (the default, 6, costs three times as much).
            zf.writestr(info, body.encode("utf-8"), compress_type=how, compresslevel=1)
    return buf.getvalue()


def workbook_bytes(header: Sequence[str], rows: Iterable[Sequence[object]], sheet: str = "data") -> bytes:
    """An XLSX file holding one table."""
    return workbook([(sheet, header, list(rows))])
