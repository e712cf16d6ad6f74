"""Read one dataset's CSV file into a table, with a clear message for every way it can fail.

Plain files (UTF-8, no quotes, every cell a number or empty, every line as long
as the header, under two megabytes) are split here directly; everything else
goes to pandas' C reader, whose exceptions are translated here (the one boundary
for pandas I/O) into :class:`~sitegen.errors.DataFileError` and chained. Both
give the same :class:`~sitegen.table.Table` (the tests read every file of the
broken-input corpus both ways), and a process that only reads plain files never
imports pandas.
Row numbers reported anywhere are 1-based data rows (the header is row 0), so
blank lines inside the data are kept as empty rows rather than skipped; blank
lines at the very end of the file are not rows.

What the reader does with awkward files (documented for users in the README):

- size, row and column limits from ``[limits]`` in site.toml are checked
  before the data are parsed (:func:`read_source` checks the size before the
  file is even read);
- spreadsheet workbooks, archives and other binary files are refused by name;
- UTF-16 and UTF-32 text (with a byte-order mark, or plainly recognisable) is
  converted; a UTF-8 byte-order mark is dropped; text that is not UTF-8 is read
  as Windows-1252 with a warning unless the sidecar names its ``encoding``;
- the separator is detected among ``, ; tab |`` (or taken from a first line
  ``sep=;`` as some spreadsheets write it), and a decimal comma is detected;
- a first line of numbers (no header), unnamed or duplicate columns and lines
  with more fields than the header are errors naming the line or column;
  unnamed empty columns at the end of every line are dropped.
"""

from __future__ import annotations

import codecs
import contextlib
import csv
import io
import os
import re
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from sitegen.confine import OUTSIDE_HINT, open_inside
from sitegen.errors import DataFileError, DataLimitError, OutsideFolderError
from sitegen.spec import DatasetSpec, Limits
from sitegen.table import NUMBER, Table, from_columns, from_frame, integer_kind

if TYPE_CHECKING:
    import pandas as pd

_CANDIDATE_DELIMITERS = (",", ";", "\t", "|")
_DELIM_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}
_HEAD_BYTES = 1 << 16
#: Longest column name read (names appear on every chart and table of the page).
MAX_NAME_CHARS = 300
_PLAIN_MAX_BYTES = 2_000_000  # above this, pandas' C reader is faster than splitting lines here
_LINE_BREAK = re.compile(r"\r\n|\r|\n")
#: A column of cells joined by line breaks, each a number (:data:`~sitegen.table.NUMBER`) or empty.
_NUMBERS = re.compile(rf"(?:{NUMBER.pattern})?(?:\n(?:{NUMBER.pattern})?)*", re.ASCII)
_SEP_LINE = re.compile(r"^\ufeff?\"?sep=(.)\"?[ \t]*$")
#: File signatures of things people save with a .csv name by mistake.
_NOT_CSV = (
    (b"PK\x03\x04", "a zip archive, for example an Excel (.xlsx) or OpenDocument (.ods) workbook"),
    (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1", "an old-style Excel (.xls) workbook"),
    (b"\x1f\x8b", "a gzip-compressed file"),
    (b"%PDF-", "a PDF document"),
    (b"\x89PNG", "a PNG image"),
)
_WIDE_BOMS = (
    (codecs.BOM_UTF32_LE, "utf-32"),
    (codecs.BOM_UTF32_BE, "utf-32"),
    (codecs.BOM_UTF16_LE, "utf-16"),
    (codecs.BOM_UTF16_BE, "utf-16"),
)


@dataclass(frozen=True, slots=True)
class LoadedTable:
    """A CSV file read into a table, plus what the reader had to decide."""

    table: Table
    delimiter: str
    decimal: str
    encoding: str
    notes: tuple[str, ...]


def _show_char(ch: str) -> str:
    return '"\\t"' if ch == "\t" else f'"{ch}"'


def _megabytes(n_bytes: float) -> str:
    mb = n_bytes / 1e6
    return f"{mb:,.1f} MB" if mb >= 10 else f"{mb:.3g} MB"


def _max_bytes(limits: Limits) -> int:
    return int(limits.max_megabytes * 1e6)


def _check_size(n_bytes: int, limits: Limits, name: str) -> None:
    if n_bytes > _max_bytes(limits):
        raise DataLimitError(
            f"{name} is {_megabytes(n_bytes)}, over the limit of {_megabytes(_max_bytes(limits))}",
            hint="raise [limits] max_megabytes in site.toml if files this large are expected",
        )


def read_source(path: Path, limits: Limits, name: str, root: Path | None = None) -> bytes:
    """Read a dataset's file, refusing one over the size limit before reading it, and (given the data
    folder ``root``) one that leads outside the data folder or is not a plain file, without reading it.

    ``OSError`` (the file vanished or cannot be opened) is left to the caller,
    which knows how to word it.
    """
    cap = _max_bytes(limits) + 1  # the file may have grown since it was measured
    try:
        with open_inside(path, root) as fh:
            size = os.fstat(fh.fileno()).st_size
            _check_size(size, limits, name)
            # read() sets aside as much memory as it is asked for: ask for the file's size, then for more in
            # pieces while it keeps growing, never for the whole limit at once.
            pieces = [fh.read(min(size + 1, cap))]
            total = len(pieces[0])
            while pieces[-1] and total < cap:
                pieces.append(fh.read(min(1 << 20, cap - total)))
                total += len(pieces[-1])
    except OutsideFolderError as exc:
        raise DataFileError(f"{name} {exc.message}", hint=OUTSIDE_HINT) from None
    raw = pieces[0] if len(pieces) == 1 else b"".join(pieces)
    _check_size(len(raw), limits, name)
    return raw


def _codec(encoding: str, name: str) -> str:
    try:
        return codecs.lookup(encoding).name
    except LookupError as exc:
        raise DataFileError(
            f"{name}: the encoding {encoding!r} is unknown",
            hint='set encoding in the sidecar to a text encoding such as "utf-8", "latin-1" or "cp1252"',
        ) from exc


def _refuse_other_formats(raw: bytes, name: str) -> None:
    for magic, what in _NOT_CSV:
        if raw.startswith(magic):
            raise DataFileError(
                f"{name} is {what}, not CSV text",
                hint="open it in the program that made it and save or export the table as CSV",
            )


def _looks_utf16(sample: bytes) -> str | None:
    """``utf-16-le``/``-be`` when the bytes are plainly UTF-16 text without a byte-order mark."""
    sample = sample[: len(sample) - len(sample) % 2]
    if len(sample) < 4:
        return None
    even, odd = sample[0::2], sample[1::2]
    if odd.count(0) >= 0.9 * len(odd) and even.count(0) == 0:
        return "utf-16-le"
    if even.count(0) >= 0.9 * len(even) and odd.count(0) == 0:
        return "utf-16-be"
    return None


def looks_wide(head: bytes, declared: str) -> bool:
    """Whether a file starting with ``head`` is UTF-16/UTF-32 text, which only the whole-file reader converts:
    the sidecar's encoding says so, or (UTF-8 declared) a byte-order mark or the pattern of its bytes does."""
    try:
        codec = codecs.lookup(declared).name
    except LookupError:
        return False  # the reader reports the unknown encoding
    if codec.startswith(("utf-16", "utf-32")):
        return True
    if codec not in ("utf-8", "utf-8-sig"):
        return False
    return any(head.startswith(bom) for bom, _ in _WIDE_BOMS) or _looks_utf16(head[:4096]) is not None


def _widen(raw: bytes, declared: str, name: str) -> tuple[bytes, str | None, list[str]]:
    """Convert UTF-16/UTF-32 text to UTF-8; returns (bytes, encoding it was in or None, notes)."""
    codec = _codec(declared, name)
    found: str | None = None
    notes: list[str] = []
    if codec.startswith(("utf-16", "utf-32")):
        found = codec
        marked = raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE))
        if codec.startswith("utf-16") and not marked and _looks_utf16(raw[:4096]) is None:
            raise DataFileError(
                f'{name}: the sidecar sets encoding = "{declared}", but the file is not UTF-16 text '
                "(it has no byte-order mark and its bytes do not look like UTF-16)",
                hint='remove key \'encoding\' or set it to the file\'s encoding, e.g. "utf-8" or "latin-1"',
            )
    elif codec in ("utf-8", "utf-8-sig"):
        found = next((enc for bom, enc in _WIDE_BOMS if raw.startswith(bom)), None)
        how = "its byte-order mark"
        if found is None:
            found = _looks_utf16(raw[:4096])
            how = "the pattern of its bytes"
        if found is not None:
            notes.append(f"{name} is {found.upper()} text (recognised from {how}); it was converted to UTF-8")
    if found is None:
        return raw, None, notes
    text = raw.decode(found, errors="replace").removeprefix("\ufeff")
    return text.encode("utf-8"), found, notes


def _refuse_binary(raw: bytes, name: str) -> None:
    nul = raw.find(b"\x00")
    if nul >= 0:
        line = raw.count(b"\n", 0, nul) + 1
        raise DataFileError(
            f"{name} is not a text file: it contains a NUL byte (line {line}, byte {nul + 1})",
            hint="export the data as CSV text; workbooks, databases and other binary files cannot be read",
        )


def _drop_trailing_blank_lines(raw: bytes) -> bytes:
    """Blank lines after the last data line are not rows; keep the last line's own line end."""
    end = len(raw)
    while end > 0 and raw[end - 1] in b" \t\r\n":
        end -= 1
    tail = raw[end:]
    cut = min((i for i in (tail.find(b"\n"), tail.find(b"\r")) if i >= 0), default=-1)
    if cut < 0:
        return raw
    return raw[: end + cut] + b"\n"


def _decode_head(raw: bytes, encoding: str, name: str) -> tuple[str, str, list[str]]:
    """Decode the start of the file (the whole header line, however long, and what follows it up to
    :data:`_HEAD_BYTES`); returns (text, encoding used, notes)."""
    first_break = raw.find(b"\n")
    head = raw[: max(_HEAD_BYTES, (len(raw) if first_break < 0 else first_break) + _HEAD_BYTES)]
    if codecs.lookup(encoding).name in ("utf-8", "utf-8-sig"):
        try:
            return head.decode("utf-8-sig", errors="strict"), "utf-8-sig", []
        except UnicodeDecodeError as exc:
            if exc.start >= len(head) - 4 and len(raw) > len(head):  # a character cut by the window
                return head[: exc.start].decode("utf-8-sig"), "utf-8-sig", []
            line = head[: exc.start].count(b"\n") + 1
            note = (
                f"{name} is not UTF-8 (first odd byte on line {line}); it was read as Windows-1252 "
                'text — set encoding = "latin-1" or the right encoding in the sidecar to silence this'
            )
            return head.decode("cp1252", errors="replace"), "cp1252", [note]
    return head.decode(encoding, errors="replace"), encoding, []


def _lines(text: str, limit: int) -> list[str]:
    return _LINE_BREAK.split(text, maxsplit=limit)[:limit]


def _fields(line: str, delimiter: str) -> list[str]:
    if '"' not in line:
        return line.split(delimiter)  # nothing quoted: the csv module would split it the same way
    try:
        return next(csv.reader([line], delimiter=delimiter), [])
    except csv.Error:
        return line.split(delimiter)


def _sniff_delimiter(text: str) -> str:
    lines = [ln for ln in _lines(text, 50) if ln.strip()]
    if not lines:
        return ","
    best, best_score = ",", -1
    for d in _CANDIDATE_DELIMITERS:
        counts = [len(_fields(ln, d)) for ln in lines]
        width = counts[0]
        if width < 2:
            continue
        score = sum(c == width for c in counts) * 100 + width
        if score > best_score:
            best, best_score = d, score
    return best


def _looks_like_decimal_comma(text: str, delimiter: str) -> bool:
    if delimiter == ",":
        return False
    rows = [_fields(ln, delimiter) for ln in _lines(text, 50)[1:]]
    cells = [c.strip() for r in rows for c in r if c.strip()]
    if not cells:
        return False
    comma_numbers = sum(1 for c in cells if _is_number(c.replace(",", ".", 1)) and "," in c)
    return comma_numbers >= max(1, len(cells) // 4)


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def read_table(raw: bytes, spec: DatasetSpec, limits: Limits, name: str) -> LoadedTable:
    """Parse CSV bytes into a :class:`LoadedTable` or raise a :class:`DataFileError`."""
    _check_size(len(raw), limits, name)
    raw, layout = read_layout(raw, spec, limits, name)
    notes = list(layout.notes)
    how = _Layout(layout.delimiter, layout.decimal, layout.encoding, layout.skip)
    table = _body(
        raw, list(layout.header), how, trailing_blank=layout.trailing_blank, notes=notes, name=name, limits=limits
    )
    if len(table.names) > limits.max_columns:
        raise DataLimitError(
            f"{name} has {len(table.names):,} columns, over the limit of {limits.max_columns:,}",
            hint="raise [limits] max_columns in site.toml if tables this wide are expected",
        )
    if len(table) == 0:
        raise DataFileError(f"{name} has a header but no data rows", hint="add data rows below the header")
    if len(table) > limits.max_rows:
        raise DataLimitError(
            f"{name} has more than {limits.max_rows:,} data rows, the limit",
            hint="raise [limits] max_rows in site.toml if tables this long are expected",
        )
    return LoadedTable(
        table=table,
        delimiter=layout.delimiter,
        decimal=layout.decimal,
        encoding=layout.wide or layout.encoding,
        notes=tuple(notes),
    )


@dataclass(frozen=True, slots=True)
class FileLayout:
    """How a CSV file is written, decided from its start: what both the whole-file and the chunked reader use."""

    delimiter: str
    decimal: str
    encoding: str  # the codec the text is read with
    skip: int  # lines before the header (a ``sep=`` line)
    header: tuple[str, ...]  # the header's fields as written
    trailing_blank: int  # unnamed columns that end the header
    notes: tuple[str, ...]
    wide: str | None  # UTF-16/UTF-32 the file was converted from, if it was


def read_layout(raw: bytes, spec: DatasetSpec, limits: Limits, name: str) -> tuple[bytes, FileLayout]:
    """Check a file's bytes (or, for the chunked reader, its first bytes) and decide how it is written.

    Returns the bytes to parse (converted to UTF-8 when the file was UTF-16/32, blank lines at the end dropped)
    and the layout; raises :class:`DataFileError` for everything that cannot be a CSV table.
    """
    if not raw.strip():
        raise DataFileError(
            f"{name} is empty" if not raw else f"{name} holds only blank lines",
            hint="export the data again; a header line naming the columns and data rows below it are needed",
        )
    _refuse_other_formats(raw, name)
    raw, wide, notes = _widen(raw, spec.encoding, name)
    if not raw.strip():
        raise DataFileError(f"{name} holds no text", hint="export the data again with a header and data rows")
    _refuse_binary(raw, name)
    raw = _drop_trailing_blank_lines(raw)
    head, encoding, more = _decode_head(raw, "utf-8" if wide else spec.encoding, name)
    notes += more
    skip = 0
    sep_line = _SEP_LINE.match(_lines(head, 1)[0])
    delimiter = spec.delimiter
    if sep_line is not None:
        skip = 1
        head = _LINE_BREAK.split(head, maxsplit=1)[1] if _LINE_BREAK.search(head) else ""
        if delimiter is None:
            delimiter = sep_line.group(1)
            notes.append(
                f"{name}: the separator {_DELIM_NAMES.get(delimiter, repr(delimiter))} was taken "
                f"from its first line {sep_line.group(0).strip()!r}"
            )
    if delimiter is None:
        delimiter = _sniff_delimiter(head)
        if delimiter != ",":
            shown = _DELIM_NAMES.get(delimiter, repr(delimiter))
            notes.append(f"columns are separated by a {shown} (detected)")
    decimal = spec.decimal
    if spec.decimal == "." and _looks_like_decimal_comma(head, delimiter):
        decimal = ","
        notes.append('numbers use a decimal comma (detected); set decimal = "," in the sidecar to make it explicit')
    if decimal == delimiter:
        raise DataFileError(
            f"{name}: the separator and the decimal mark are both {delimiter!r}",
            hint='set delimiter = ";" (or the separator the file really uses) in the sidecar',
        )
    header = _header(head, delimiter, name)
    if len([h for h in header if h.strip()]) < 2 and spec.delimiter is not None:
        found = _sniff_delimiter(head)
        raise DataFileError(
            f"{name}: the sidecar sets delimiter = {_show_char(spec.delimiter)}, "
            f"but the header line has no such separator ({_lines(head, 1)[0][:40]!r})",
            hint=f"remove key 'delimiter' or set it to {_show_char(found)}",
        )
    trailing_blank = _check_header(header, name, limits, decimal)
    layout = FileLayout(delimiter, decimal, encoding, skip, tuple(header), trailing_blank, tuple(notes), wide)
    return raw, layout


@dataclass(frozen=True, slots=True)
class _Layout:
    delimiter: str
    decimal: str
    encoding: str
    skip: int  # lines before the header


def _body(
    raw: bytes, header: list[str], how: _Layout, *, trailing_blank: int, notes: list[str], name: str, limits: Limits
) -> Table:
    """The data rows: split here when the file is plain, else by pandas."""
    if not trailing_blank and how.decimal == "." and how.encoding == "utf-8-sig":
        plain = read_plain(raw, how.delimiter, skip=how.skip, width=len(header))
        if plain is not None:
            return plain
    frame = _parse(raw, how.delimiter, how.decimal, how.encoding, name, skip=how.skip, max_rows=limits.max_rows)
    frame, dropped = drop_unnamed(frame, header, trailing_blank, name)
    if dropped:
        notes.append(f"{name}: {dropped} unnamed empty column(s) at the end of each line were ignored")
    table = from_frame(frame)
    return Table(table.names, table.columns, np.arange(1, len(frame) + 1, dtype=np.int64))


def read_plain(raw: bytes, delimiter: str, *, skip: int, width: int) -> Table | None:
    """The table of a plain file, or None when the file needs the general reader.

    Plain: at most two megabytes of UTF-8 without quotation marks, every line holding
    ``width`` fields, and every cell a number (as :data:`~sitegen.table.NUMBER`) or empty.
    A column of whole numbers without gaps is read as integers, as pandas reads it.
    """
    if len(raw) > _PLAIN_MAX_BYTES or b'"' in raw:
        return None
    try:
        text = raw.decode("utf-8-sig").lstrip("\ufeff")  # every leading byte-order mark, as the header reader
    except UnicodeDecodeError:
        return None
    lines = _LINE_BREAK.split(text)
    if lines and lines[-1] == "":
        lines.pop()  # the last line's own line end
    header = lines[skip].split(delimiter) if len(lines) > skip else []
    body = lines[skip + 1 :]
    if len(header) != width:
        return None
    rows = [line.split(delimiter) for line in body]
    if any(len(fields) != width for fields in rows):
        return None  # blank lines, short or long lines: the general reader words these
    cells: list[list[str]] = [list(column) for column in zip(*rows, strict=True)] if rows else [[]] * width
    del rows
    names = [h.strip() for h in header]
    if len(set(names)) != len(names):
        return None
    columns: dict[str, np.ndarray] = {}
    for name, column in zip(names, cells, strict=True):
        # one match over the column's cells, a line each (no cell holds a line break), not a match a cell
        if not _NUMBERS.fullmatch("\n".join(column)):
            return None
        if max(map(len, column), default=0) > 18 and any(len(c) > 18 and integer_kind([c]) == "wide" for c in column):
            return None  # a whole number beyond 64 bits: the general reader decides what the column is
        kind = integer_kind(column) if column and "" not in column else "other"
        if kind == "int":
            columns[name] = np.array([int(c) for c in column], dtype=np.int64)
        elif "" in column:
            columns[name] = np.array([float(c) if c else np.nan for c in column], dtype=np.float64)
        else:
            columns[name] = np.array(list(map(float, column)), dtype=np.float64)
    return from_columns(columns)


def _header(head: str, delimiter: str, name: str) -> list[str]:
    text = head.lstrip("\ufeff")
    if not _lines(text, 1)[0].strip():
        raise DataFileError(
            f"{name}: the first line is blank where the header should be",
            hint="put the column names on the first line, directly followed by the data rows",
        )
    try:  # the first record, which may run over several lines when a quoted name holds a line break
        return next(csv.reader(_lines(text, 50), delimiter=delimiter))
    except (csv.Error, StopIteration):
        return _fields(_lines(text, 1)[0], delimiter)


def _check_header(header: list[str], name: str, limits: Limits, decimal: str) -> int:
    """Check the column names; returns how many unnamed columns end the header."""
    cleaned = [h.strip() for h in header]
    if len(cleaned) > limits.max_columns:
        raise DataLimitError(
            f"{name} has {len(cleaned):,} columns, over the limit of {limits.max_columns:,}",
            hint="raise [limits] max_columns in site.toml if tables this wide are expected",
        )
    trailing = 0
    while trailing < len(cleaned) and not cleaned[-1 - trailing]:
        trailing += 1
    named = cleaned[: len(cleaned) - trailing]
    if not named:
        raise DataFileError(f"{name}: the header line names no columns", hint="put the column names on the first line")
    if len(named) < 2:
        shown = named[0][:40]
        raise DataFileError(
            f"{name}: the header line has only one column ({shown!r})",
            hint='check the separator: set delimiter = ";" (or the right one) in the sidecar; '
            "a table needs at least two columns",
        )
    if all(_is_number(h.replace(",", ".", 1) if decimal == "," else h) for h in named):
        preview = ", ".join(named[:4]) + (", …" if len(named) > 4 else "")
        raise DataFileError(
            f"{name}: the first line ({preview}) holds numbers, not column names",
            hint="add a header line that names each column, e.g. x,y, above the data",
        )
    for i, h in enumerate(named, start=1):
        if len(h) > MAX_NAME_CHARS:
            raise DataFileError(
                f"{name}: the name of column {i} ({h[:40]!r}…) is {len(h):,} characters long, more than the "
                f"{MAX_NAME_CHARS:,} allowed",
                hint="shorten the column names in the header line",
            )
    blanks = [i + 1 for i, h in enumerate(named) if not h]
    if blanks:
        raise DataFileError(f"{name}: column {blanks[0]} of the header has no name", hint="give every column a name")
    seen: dict[str, int] = {}
    for i, h in enumerate(named, start=1):
        if h in seen:
            raise DataFileError(
                f"{name}: column name {h!r} appears twice in the header (columns {seen[h]} and {i})",
                hint="rename one of them so each column has its own name",
            )
        seen[h] = i
    return trailing


def drop_unnamed(
    frame: pd.DataFrame, header: Sequence[str], trailing: int, name: str, first_row: int = 1
) -> tuple[pd.DataFrame, int]:
    """Drop unnamed columns at the end of the header when they hold no values (a file read whole or in chunks;
    ``first_row`` is the data row number of the frame's first row); returns the frame and how many were dropped."""
    if not trailing or len(frame.columns) != len(header):
        return frame, 0
    first = len(header) - trailing
    for offset in range(trailing):
        text = frame.iloc[:, first + offset].astype("string").str.strip()
        filled = (text.notna() & (text != "")).to_numpy(dtype=bool)
        if bool(filled.any()):
            raise DataFileError(
                f"{name}: column {first + offset + 1} has no name in the header but holds a value "
                f"(data row {first_row + int(filled.argmax())})",
                hint="give every column a name in the header line",
            )
    return frame.iloc[:, :first], trailing


def pandas_options(delimiter: str, decimal: str, encoding: str, *, skip: int) -> dict[str, Any]:
    """The options of pandas' C reader for a file of this layout (the whole-file and the chunked reader)."""
    return {
        "sep": delimiter,
        "decimal": decimal,
        # With a decimal comma, a point can only group thousands (1.234,5).
        "thousands": "." if decimal == "," and delimiter != "." else None,
        "encoding": encoding,
        "encoding_errors": "replace",
        "skip_blank_lines": False,
        "skipinitialspace": True,
        "skiprows": skip,
        "index_col": False,
        "engine": "c",
    }


@contextlib.contextmanager
def pandas_errors(name: str, delimiter: str, skip: int, *, from_memory: bool = False) -> Iterator[None]:
    """Translate the exceptions of pandas' reader inside the block into :class:`DataFileError` (chained).

    Inside the block pandas' warning about a line with more fields than the header is an error. With
    ``from_memory`` (the reader's source is bytes in memory, whose reading can fail only for want of memory),
    pandas' "read(nbytes) on source failed" is the memory bound's :class:`MemoryError`: pandas' C reader
    drops the original exception, so the chain cannot tell.
    """
    comma_hint = (
        "; a number written with a decimal comma in a comma-separated file counts as two fields — "
        'quote such numbers, or separate fields with ";" and set delimiter = ";" and decimal = "," '
        "in the sidecar"
        if delimiter == ","
        else ""
    )
    import pandas as pd  # noqa: PLC0415 - only files that are not plain need it

    try:
        with warnings.catch_warnings():
            # pandas warns (and drops values) when the first data line has more fields than the header.
            warnings.simplefilter("error", pd.errors.ParserWarning)
            yield
    except pd.errors.EmptyDataError as exc:
        raise DataFileError(f"{name} has no columns", hint="export the data again with a header row") from exc
    except pd.errors.ParserWarning as exc:
        raise DataFileError(
            f"{name}: line {2 + skip} has more fields than the header",
            hint=f"every line needs the same number of separators as the header{comma_hint}",
        ) from exc
    except pd.errors.ParserError as exc:
        detail = _parser_detail(exc)
        lost = from_memory and "on source failed" in detail
        if "out of memory" in detail or lost or _memory_in_chain(exc):
            raise MemoryError(detail) from exc  # the memory bound of this fit (see sitegen.executor)
        hint = (
            'a quotation mark (") opened there is never closed: close it or remove it'
            if "inside string" in detail
            else f"every line needs the same number of separators as the header{comma_hint}"
        )
        raise DataFileError(f"{name} cannot be parsed as a table: {detail}", hint=hint) from exc
    except (UnicodeError, ValueError, OverflowError) as exc:
        raise DataFileError(f"{name} cannot be read: {exc}") from exc


def _memory_in_chain(exc: BaseException) -> bool:
    """Whether a MemoryError lies behind ``exc`` (pandas reports one raised by the source's ``read`` as
    "Calling read(nbytes) on source failed")."""
    seen: set[int] = set()
    cause: BaseException | None = exc
    while cause is not None and id(cause) not in seen:
        if isinstance(cause, MemoryError):
            return True
        seen.add(id(cause))
        cause = cause.__cause__ or cause.__context__
    return False


def _parse(
    raw: bytes, delimiter: str, decimal: str, encoding: str, name: str, *, skip: int, max_rows: int
) -> pd.DataFrame:
    import pandas as pd  # noqa: PLC0415 - only files that are not plain need it

    with pandas_errors(name, delimiter, skip, from_memory=True):
        frame: pd.DataFrame = pd.read_csv(
            io.BytesIO(raw),
            **pandas_options(delimiter, decimal, encoding, skip=skip),
            nrows=max_rows + 1,
            low_memory=False,
        )
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def _parser_detail(exc: Exception) -> str:
    text = str(exc).strip()
    # pandas says e.g. "Error tokenizing data. C error: Expected 2 fields in line 5, saw 3"
    if "C error:" in text:
        text = text.split("C error:", 1)[1].strip()
    return text.rstrip(".")[:300]
