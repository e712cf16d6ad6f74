"""A small, fast XLSX writer for plain tables (one sheet, numbers and text).

openpyxl costs about 20 µs per cell, which made workbooks the slowest part of a
build; a table needs only a handful of fixed XML parts, written here directly.
Text is stored as inline strings (never formulas); the tests read every
workbook back with openpyxl. Timestamps are fixed so builds are reproducible.
"""

from __future__ import annotations

import io
import math
import zipfile
from collections.abc import Iterable, Sequence
from xml.sax.saxutils import escape

_FIXED_TIME = (2000, 1, 1, 0, 0, 0)
_NUMBERS = frozenset((float, int, type(None)))
_CONTENT_TYPES = (
    '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    '<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
    '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.relationships+xml"/>'
    '<Default Extension="xml" ContentType="application/xml"/>'
    '<Override PartName="/xl/workbook.xml" '
    'ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"/>'
    '<Override PartName="/xl/worksheets/sheet1.xml" '
    'ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"/>'
    "</Types>"
)
_ROOT_RELS = (
    '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    '<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">'
    '<Relationship Id="rId1" '
    'Type="http://schemas.openxmlformats.org/officeDocument/2006/relationships/officeDocument" '
    'Target="xl/workbook.xml"/></Relationships>'
)
_WORKBOOK_RELS = (
    '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    '<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">'
    '<Relationship Id="rId1" '
    'Type="http://schemas.openxmlformats.org/officeDocument/2006/relationships/worksheet" '
    'Target="worksheets/sheet1.xml"/></Relationships>'
)


def _workbook(sheet: str) -> str:
    return (
        '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
        '<workbook xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main" '
        'xmlns:r="http://schemas.openxmlformats.org/officeDocument/2006/relationships">'
        f'<sheets><sheet name="{escape(sheet[:31], {chr(34): "&quot;"})}" sheetId="1" r:id="rId1"/></sheets>'
        "</workbook>"
    )


def _illegal_free(text: str) -> str:
    # XML 1.0 forbids most control characters; drop them rather than write a broken file.
    return "".join(ch for ch in text if ch in "\t\n\r" or ord(ch) >= 32)


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
    return f'<c t="inlineStr"><is><t xml:space="preserve">{text}</t></is></c>'


def workbook_bytes(header: Sequence[str], rows: Iterable[Sequence[object]], sheet: str = "data") -> bytes:
    """An XLSX file holding ``header`` and ``rows``; text cells are stored as text."""
    parts = [
        '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
        '<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main"><sheetData>'
    ]
    templates: dict[tuple[type, ...], tuple[str, tuple[int, ...]]] = {}
    for r, row in enumerate([list(header), *rows], start=1):
        # Rows of the same cell types share one template: numbers are formatted in one % operation.
        kinds = tuple(map(type, row))
        known = templates.get(kinds)
        if known is None:
            texts = tuple(i for i, k in enumerate(kinds) if k not in _NUMBERS)
            known = templates[kinds] = (
                "".join("%s" if i in texts else "<c><v>%r</v></c>" for i in range(len(row))),
                texts,
            )
        template, texts = known
        values = list(row)
        for i in texts:
            values[i] = _cell(values[i])
        cells = template % tuple(values)
        if "n</v>" in cells or "e</v>" in cells:  # nan, inf, None: empty cells
            for word in ("None", "nan", "inf", "-inf"):
                cells = cells.replace(f"<c><v>{word}</v></c>", "<c/>")
        parts.append(f'<row r="{r}">{cells}</row>')
    parts.append("</sheetData></worksheet>")
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED, compresslevel=1) as zf:
        for name, body in (
            ("[Content_Types].xml", _CONTENT_TYPES),
            ("_rels/.rels", _ROOT_RELS),
            ("xl/workbook.xml", _workbook(sheet)),
            ("xl/_rels/workbook.xml.rels", _WORKBOOK_RELS),
            ("xl/worksheets/sheet1.xml", "".join(parts)),
        ):
            info = zipfile.ZipInfo(name, date_time=_FIXED_TIME)
            # The fixed parts are a few hundred bytes: stored as they are, only the sheet is compressed.
            info.compress_type = zipfile.ZIP_DEFLATED if name.endswith("sheet1.xml") else zipfile.ZIP_STORED
            zf.writestr(info, body.encode("utf-8"))
    return buf.getvalue()
