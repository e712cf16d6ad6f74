"""Each dataset's workbook (tables.xlsx) holds every table of its folder, cell for cell as in the CSV files.

openpyxl, an independent reader of the format, opens each workbook; numbers must come
back as numbers equal to the CSV's shortest round-trip text, text as text.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path
from typing import Any

import numpy as np
from conftest import Built
from openpyxl import load_workbook

from sitegen.report.tables import cell_kinds, clean_rows, columns_to_csv, rows_from_columns, rows_to_csv_bytes
from sitegen.report.xlsx import _sheet_xml, csv_lines


def _csv_cell(text: str) -> object:
    if text == "":
        return None
    try:
        return float(text)
    except ValueError:
        return text


def _book_cell(value: object) -> object:
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    assert isinstance(value, int | float)
    return float(value)


def test_every_table_is_a_sheet_with_the_csv_values(example_build: Built) -> None:
    folders = sorted(p for p in (example_build.site / "datasets").iterdir() if (p / "tables.xlsx").is_file())
    assert len(folders) >= 10
    for folder in folders:
        wb = load_workbook(folder / "tables.xlsx", read_only=True)
        tables = sorted(p.stem for p in folder.glob("*.csv") if not p.name.startswith("source-"))
        assert wb.sheetnames[0] == "about", folder.name  # the metadata sheet comes first
        assert sorted(wb.sheetnames[1:]) == tables, folder.name
        for name in tables:
            with (folder / f"{name}.csv").open(encoding="utf-8", newline="") as fh:
                expected = [[_csv_cell(c) for c in row] for row in csv.reader(fh)]
            got = [[_book_cell(c) for c in row] for row in wb[name].iter_rows(values_only=True)]
            assert len(got) == len(expected), (folder.name, name)
            for row_got, row_expected in zip(got, expected, strict=True):
                for cell, want in zip(row_got, row_expected, strict=True):
                    _check_cell(cell, want, folder / f"{name}.csv")
        wb.close()


def _check_cell(cell: object, want: object, path: Path) -> None:
    if isinstance(want, float) and math.isnan(want):
        return
    if isinstance(cell, bool):  # a true/false cell; the CSV writes True/False
        assert str(cell) == want, (path, cell, want)
    elif isinstance(want, float) and isinstance(cell, str):  # a text cell that happens to look numeric
        assert cell in path.read_text(encoding="utf-8"), (path, cell)
    else:
        assert cell == want, (path, cell, want)


def _odd_columns() -> list[np.ndarray[Any, Any]]:
    """Columns with the awkward cells: negative, tiny and huge numbers, gaps, infinities, formula-like text."""
    return [
        np.array([1, 2, 3, -4], dtype=np.int64),
        np.array([0.1, np.nan, -2.5e-300, 1e22]),
        np.array([np.inf, 3.0, -np.inf, 123456789.125]),
        np.array([np.nan, np.nan, np.nan, np.nan]),
        np.array(["", "high leverage; outlier", "=1+2", "a < b & c > d"], dtype=object),
    ]


def test_sheets_from_csv_lines_equal_sheets_from_cells() -> None:
    """The short cut for tables of numbers then text (the CSV's own lines) writes the same XML as cell by cell."""
    columns = [
        *_odd_columns(),
        np.array(["", "", "@x", "é"], dtype=object),
        np.array(["", "", "", ""], dtype=object),
    ]
    cases = (columns, columns[:1], columns[3:4], columns[4:5], columns[6:], columns[2:], [c[:0] for c in columns])
    for values in cases:
        header, _ = clean_rows([f"c{i}" for i in range(len(values))], [])
        cells = rows_from_columns(values)
        text = rows_to_csv_bytes(header, cells).decode("utf-8")
        lines = csv_lines(text, ["n" if v.dtype.kind in "fiu" else "t" for v in values])
        assert lines is not None
        assert _sheet_xml(header, lines) == _sheet_xml(header, cells)
    # Where the short cut cannot be taken it says so: text before numbers, quoted cells.
    assert csv_lines("a,b\nx,1\n", ["t", "n"]) is None
    assert csv_lines('a,b\n1,"x,y"\n', ["n", "t"]) is None
    assert csv_lines('a\n"x""y"\n', ["t"]) is None


def test_csv_made_column_by_column_equals_the_csv_module() -> None:
    """The column-wise CSV writer gives the csv module's bytes, or declines."""
    columns = [
        *_odd_columns(),
        np.array(["", "", "-x", "é"], dtype=object),
        np.array([5, 6, 7, 8], dtype=np.uint8),
    ]
    for values in (columns, columns[:1], columns[4:6], columns[2:4], [c[:0] for c in columns]):
        header, _ = clean_rows([f"c{i}" for i in range(len(values))], [])
        made = columns_to_csv(header, values)
        assert made == rows_to_csv_bytes(header, rows_from_columns(values))
    # Cells the csv module would quote, a row of one empty cell, yes/no values: declined.
    assert columns_to_csv(["t"], [columns[4]]) is None
    for odd in (["a,b"], ['say "x"'], ["two\nlines"], ["cr\r"]):
        assert columns_to_csv(["t"], [np.array(odd, dtype=object)]) is None
    assert columns_to_csv(["t"], [np.array([np.nan, 1.0])]) is None
    assert columns_to_csv(["t"], [np.array([True, False])]) is None
    assert columns_to_csv(["t"], [np.array([1.5, "x"], dtype=object)]) is None


def test_only_numbers_and_all_text_columns_take_the_short_cut() -> None:
    """Yes/no values, mixed cells and extended precision go cell by cell (their sheet cells differ)."""
    mixed = [np.array([1.5]), np.array([2], dtype=np.int32), np.array(["a"], dtype=object)]
    assert cell_kinds(mixed) == ["n", "n", "t"]
    assert cell_kinds([np.array([True, False])]) is None
    assert cell_kinds([np.array(["a", 1.5], dtype=object)]) is None
    assert cell_kinds([np.array([1.5], dtype=np.longdouble)]) is None
    assert columns_to_csv(["t"], [np.array([1.5, 2.5], dtype=np.longdouble)]) is None
