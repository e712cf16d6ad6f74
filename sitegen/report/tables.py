"""Downloadable tables: CSV, JSON and XLSX at full precision, safe to open in a spreadsheet.

Text cells a spreadsheet would execute (starting with ``=``, ``+``, ``-``, ``@``,
tab or carriage return) get a leading single quote (common practice against
formula injection); numbers stay numbers. NaN and ±inf are empty cells.
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

#: First characters that make a spreadsheet read a text cell as a formula (common practice:
#: = + - @ tab CR), plus their full-width forms, which some spreadsheet input methods convert.
_DANGEROUS = ("=", "+", "-", "@", "\t", "\r", "\uff1d", "\uff0b", "\uff0d", "\uff20")


def neutralise(text: str) -> str:
    """Make a text cell inert for spreadsheets (a leading single quote)."""
    return "'" + text if text.startswith(_DANGEROUS) else text


def _cell(value: Any) -> Any:
    if isinstance(value, bool) or value is None:
        return value
    if isinstance(value, float | np.floating):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, str):
        return neutralise(value)
    return neutralise(str(value))


def clean_rows(columns: Sequence[str], rows: Sequence[Sequence[Any]]) -> tuple[list[str], list[list[Any]]]:
    """Header and rows with every cell cleaned (neutralised text, NaN/inf as missing)."""
    header = [one_line_end(neutralise(str(c))) for c in columns]
    return header, [[one_line_end(_cell(v)) for v in row] for row in rows]


def rows_to_csv_bytes(header: Sequence[str], rows: Sequence[Sequence[Any]]) -> bytes:
    """CSV of already-cleaned rows: shortest round-trip floats (``repr``), empty missing cells, LF."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buf.getvalue().encode("utf-8")


_NEEDS_QUOTES = re.compile(r'[,"\n\r]')


def columns_to_csv(header: Sequence[str], values: Sequence[np.ndarray[Any, Any]]) -> bytes | None:
    """The bytes :func:`rows_to_csv_bytes` writes for these columns, made column by column; None when a
    column is neither numbers nor plain text that needs no quoting (the caller then goes row by row)."""
    cols: list[list[str]] = []
    for arr in values:
        kind = arr.dtype.kind
        if kind == "f" and arr.dtype.itemsize > 8:
            return None  # extended precision: its scalars are not Python floats
        if kind == "f":
            col = list(map(repr, arr.tolist()))
            finite = np.isfinite(arr)
            if not finite.all():
                for i in np.flatnonzero(~finite).tolist():
                    col[i] = ""
        elif kind in "iu":
            col = list(map(str, arr.tolist()))
        else:
            items = arr.tolist()
            if not all(type(v) is str for v in items):
                return None
            col = [neutralise(v) for v in items]
            if _NEEDS_QUOTES.search("".join(col)):
                return None
        cols.append(col)
    if len(cols) == 1 and "" in cols[0]:
        return None  # a row of one empty cell is written as "" by the csv module
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerow(header)
    if cols and cols[0]:
        buf.write("\n".join(map(",".join, zip(*cols, strict=True))))
        buf.write("\n")
    return buf.getvalue().encode("utf-8")


def cell_kinds(values: Sequence[np.ndarray[Any, Any]]) -> list[str] | None:
    """Each column's kind for a sheet made from CSV lines: "n" numbers (floats up to 64 bits, integers),
    "t" text (every cell a string); None when some column is neither (yes/no values, mixed cells)."""
    kinds = []
    for arr in values:
        if (arr.dtype.kind == "f" and arr.dtype.itemsize <= 8) or arr.dtype.kind in "iu":
            kinds.append("n")
        elif arr.dtype.kind == "O" and all(type(v) is str for v in arr.tolist()):
            kinds.append("t")
        else:
            return None
    return kinds


def rows_from_columns(values: Sequence[np.ndarray[Any, Any]]) -> list[list[Any]]:
    """Row lists from column arrays (for tables small enough to handle in Python)."""
    cols: list[list[Any]] = []
    for arr in values:
        if arr.dtype.kind == "f":
            cols.append([v if math.isfinite(v) else None for v in arr.tolist()])
        elif arr.dtype.kind in "iub":
            cols.append(arr.tolist())
        else:
            cols.append([one_line_end(_cell(v)) for v in arr.tolist()])
    return [list(r) for r in zip(*cols, strict=True)]


def one_line_end(value: Any) -> Any:
    # With LF line ends the CSV writer quotes a cell holding "\n" but not one holding a bare "\r",
    # which readers take for a line break: text line ends become "\n" so such cells are quoted.
    if isinstance(value, str) and "\r" in value:
        return value.replace("\r\n", "\n").replace("\r", "\n")
    return value


def write_large_csv(columns: Sequence[str], values: Sequence[np.ndarray[Any, Any]], path: Path) -> None:
    """CSV like :func:`rows_to_csv_bytes` for a large table, streamed in chunks by pandas.

    Large tables never sit in memory as text; pandas is imported only here.
    """
    import pandas as pd  # noqa: PLC0415

    data: dict[str, Any] = {}
    for name, arr in zip(columns, values, strict=True):
        key = one_line_end(neutralise(str(name)))
        if arr.dtype.kind == "f":
            data[key] = np.where(np.isfinite(arr), arr, np.nan)
        elif arr.dtype.kind in "iub":
            data[key] = arr
        else:
            data[key] = [one_line_end(_cell(v)) for v in arr.tolist()]
    with path.open("w", encoding="utf-8", newline="") as fh:
        pd.DataFrame(data).to_csv(fh, index=False, na_rep="", lineterminator="\n", chunksize=20_000)
