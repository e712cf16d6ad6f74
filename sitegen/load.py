"""Read one dataset's CSV file into a table, with a clear message for every way it can fail.

pandas is the CSV engine; its exceptions are translated here (the one boundary
for pandas I/O) into :class:`~sitegen.errors.DataFileError` and chained.
Row numbers reported anywhere are 1-based data rows (the header is row 0), so
blank lines are kept as empty rows rather than skipped.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass

import pandas as pd

from sitegen.errors import DataFileError, DataLimitError
from sitegen.spec import DatasetSpec, Limits

_CANDIDATE_DELIMITERS = (",", ";", "\t", "|")
_DELIM_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}


@dataclass(frozen=True, slots=True)
class LoadedTable:
    """A CSV file read into a frame, plus what the reader had to decide."""

    frame: pd.DataFrame
    delimiter: str
    decimal: str
    encoding: str
    notes: tuple[str, ...]


def _check_limits(raw: bytes, limits: Limits, name: str) -> None:
    megabytes = len(raw) / 1e6
    if megabytes > limits.max_megabytes:
        raise DataLimitError(
            f"{name} is {megabytes:,.1f} MB, over the limit of {limits.max_megabytes:,.0f} MB",
            hint="raise [limits] max_megabytes in site.toml if this size is expected",
        )


def _decode_head(raw: bytes, encoding: str) -> tuple[str, str, list[str]]:
    """Decode the start of the file; returns (text, encoding used, notes)."""
    head = raw[: 1 << 16]
    if encoding.lower().replace("_", "-") in ("utf-8", "utf8"):
        try:
            return head.decode("utf-8-sig", errors="strict"), "utf-8-sig", []
        except UnicodeDecodeError as exc:
            if exc.start >= len(head) - 4:  # a multi-byte character cut by the 64 KiB window
                return head[: exc.start].decode("utf-8-sig"), "utf-8-sig", []
            line = head[: exc.start].count(b"\n") + 1
            note = (
                f"the file is not UTF-8 (first odd byte on line {line}); it was read as Windows-1252 "
                'text — set encoding = "latin-1" or the right encoding in the sidecar to silence this'
            )
            return head.decode("cp1252", errors="replace"), "cp1252", [note]
    return head.decode(encoding, errors="replace"), encoding, []


def _sniff_delimiter(text: str) -> str:
    lines = [ln for ln in text.splitlines()[:50] if ln.strip()]
    if not lines:
        return ","
    best, best_score = ",", -1
    for d in _CANDIDATE_DELIMITERS:
        counts = [len(next(csv.reader([ln], delimiter=d))) for ln in lines]
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
    rows = list(csv.reader(text.splitlines()[1:50], delimiter=delimiter))
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
    _check_limits(raw, limits, name)
    if not raw.strip():
        raise DataFileError(
            f"{name} is empty", hint="export the data again; a header row and data rows are needed"
        )
    if b"\x00" in raw[:4096]:
        raise DataFileError(
            f"{name} is not a text file (it contains NUL bytes)",
            hint="export the data as CSV text; spreadsheet workbooks and binaries cannot be read",
        )
    head, encoding, notes = _decode_head(raw, spec.encoding)
    delimiter = spec.delimiter or _sniff_delimiter(head)
    decimal = spec.decimal
    if spec.delimiter is None and delimiter != ",":
        notes.append(f"columns are separated by a {_DELIM_NAMES.get(delimiter, repr(delimiter))} (detected)")
    if spec.decimal == "." and _looks_like_decimal_comma(head, delimiter):
        decimal = ","
        notes.append(
            'numbers use a decimal comma (detected); set decimal = "," in the sidecar to make it explicit'
        )
    header = _header(head, delimiter, name)
    _check_header(header, name, limits)
    frame = _parse(raw, delimiter, decimal, encoding, name)
    if len(frame) == 0:
        raise DataFileError(f"{name} has a header but no data rows", hint="add data rows below the header")
    if len(frame) > limits.max_rows:
        raise DataLimitError(
            f"{name} has {len(frame):,} rows, over the limit of {limits.max_rows:,}",
            hint="raise [limits] max_rows in site.toml if this size is expected",
        )
    frame.index = pd.RangeIndex(1, len(frame) + 1)
    return LoadedTable(
        frame=frame, delimiter=delimiter, decimal=decimal, encoding=encoding, notes=tuple(notes)
    )


def _header(head: str, delimiter: str, name: str) -> list[str]:
    first = head.lstrip("\ufeff").splitlines()[0] if head.strip() else ""
    try:
        return next(csv.reader([first], delimiter=delimiter))
    except (csv.Error, StopIteration) as exc:
        raise DataFileError(f"{name}: the header line cannot be read ({exc})") from exc


def _check_header(header: list[str], name: str, limits: Limits) -> None:
    cleaned = [h.strip() for h in header]
    if len(cleaned) > limits.max_columns:
        raise DataLimitError(
            f"{name} has {len(cleaned):,} columns, over the limit of {limits.max_columns:,}",
            hint="raise [limits] max_columns in site.toml if this is expected",
        )
    if len(cleaned) < 2:
        raise DataFileError(
            f"{name}: the header has only one column ({cleaned[0][:40]!r})"
            if cleaned
            else f"{name}: the header line is empty",
            hint='check the separator; set delimiter = ";" (or the right one) in the sidecar',
        )
    blanks = [i + 1 for i, h in enumerate(cleaned) if not h]
    if blanks:
        raise DataFileError(
            f"{name}: column {blanks[0]} of the header has no name", hint="give every column a name"
        )
    seen: dict[str, int] = {}
    for i, h in enumerate(cleaned, start=1):
        if h in seen:
            raise DataFileError(
                f"{name}: column name {h!r} appears twice (columns {seen[h]} and {i})",
                hint="rename one of them so each column has its own name",
            )
        seen[h] = i


def _parse(raw: bytes, delimiter: str, decimal: str, encoding: str, name: str) -> pd.DataFrame:
    try:
        frame = pd.read_csv(
            io.BytesIO(raw),
            sep=delimiter,
            decimal=decimal,
            encoding=encoding,
            encoding_errors="replace",
            skip_blank_lines=False,
            skipinitialspace=True,
            engine="c",
            low_memory=False,
        )
    except pd.errors.EmptyDataError as exc:
        raise DataFileError(f"{name} has no columns", hint="export the data again with a header row") from exc
    except pd.errors.ParserError as exc:
        raise DataFileError(
            f"{name} cannot be parsed as a table: {_parser_detail(exc)}",
            hint="every line needs the same number of separators as the header",
        ) from exc
    except (UnicodeDecodeError, ValueError, OverflowError, MemoryError) as exc:
        raise DataFileError(f"{name} cannot be read: {exc}") from exc
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def _parser_detail(exc: Exception) -> str:
    text = str(exc).strip()
    # pandas says e.g. "Error tokenizing data. C error: Expected 2 fields in line 5, saw 3"
    if "C error:" in text:
        text = text.split("C error:", 1)[1].strip()
    return text.rstrip(".")
