"""A dataset's table as the fitting stages see it: named numpy columns and their CSV row numbers.

Small on purpose (no pandas): reading a plain CSV, building the design and
deriving the per-row results need named columns, row selection and a numeric
view, nothing more, and a process that fits one dataset should not pay for
importing a data-frame library. A column is ``float64``, ``int64``, ``bool`` or
``object`` (text, with ``None`` for an empty cell), as the CSV reader typed it.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

#: A number as a CSV cell may write it (what both CSV readers agree on; common practice).
#: Written so that no two parts can match the same digits: a failed match costs linear time,
#: even on a cell of many thousand digits followed by a letter.
NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?", re.ASCII)  # ASCII digits only, as pandas
_INTEGER = re.compile(r"[+-]?\d+", re.ASCII)
_SPECIAL = {"inf": math.inf, "+inf": math.inf, "-inf": -math.inf, "infinity": math.inf, "+infinity": math.inf}
_SPECIAL["-infinity"] = -math.inf


@dataclass(frozen=True, slots=True)
class Table:
    """Named columns of equal length, and the 1-based CSV data row of each entry."""

    names: tuple[str, ...]
    columns: tuple[NDArray[Any], ...]
    rows: NDArray[np.int64]

    def __len__(self) -> int:
        return int(self.rows.shape[0])

    def __contains__(self, name: object) -> bool:
        return name in self.names

    def __getitem__(self, name: str) -> NDArray[Any]:
        return self.columns[self.names.index(name)]

    def take(self, keep: NDArray[Any]) -> Table:
        """The rows selected by a boolean mask or an index array (this table itself when a mask keeps every row:
        the columns are never written to, so they are shared rather than copied)."""
        mask = np.asarray(keep)
        if mask.dtype == np.bool_ and mask.shape == (len(self),) and bool(mask.all()):
            return self
        return Table(self.names, tuple(c[keep] for c in self.columns), self.rows[keep])

    def assign(self, name: str, values: NDArray[Any]) -> Table:
        """This table with column ``name`` set to ``values`` (added at the end if it is new)."""
        if name in self.names:
            cols = tuple(values if n == name else c for n, c in zip(self.names, self.columns, strict=True))
            return Table(self.names, cols, self.rows)
        return Table((*self.names, name), (*self.columns, values), self.rows)

    def as_dict(self) -> dict[str, NDArray[Any]]:
        """The columns by name (what patsy takes as data)."""
        return dict(zip(self.names, self.columns, strict=True))


def from_columns(columns: Mapping[str, ArrayLike], rows: ArrayLike | None = None) -> Table:
    """A table from named columns; rows numbered from 1 unless given."""
    names = tuple(str(k) for k in columns)
    cols = tuple(np.asarray(columns[k]) for k in columns)
    n = len(cols[0]) if cols else 0
    numbers = np.arange(1, n + 1, dtype=np.int64) if rows is None else np.asarray(rows, dtype=np.int64)
    return Table(names, cols, numbers)


def from_frame(frame: Any) -> Table:
    """A table from a pandas DataFrame (the general CSV reader's result, or a test's frame).

    Numeric columns keep their dtype; anything else (booleans included: a cell reading ``True`` is a word,
    not the number 1) becomes text with None where the frame has a missing value.
    """
    names = []
    cols = []
    for key in frame.columns:
        series = frame[key]
        kind = series.dtype.kind
        if kind == "f":
            values: NDArray[Any] = series.to_numpy(dtype=np.float64)
        elif kind in "iu":
            values = series.to_numpy()
        else:  # text, and words such as True/False, which pandas reads as booleans: text, not numbers
            values = np.array([_text_or_none(v) for v in series.tolist()], dtype=object)
        names.append(str(key))
        cols.append(values)
    try:
        rows = np.asarray(frame.index, dtype=np.int64)
    except (TypeError, ValueError):
        rows = np.arange(1, len(frame) + 1, dtype=np.int64)
    return Table(tuple(names), tuple(cols), rows)


def as_table(data: Table | Any) -> Table:
    """``data`` as a :class:`Table` (a pandas DataFrame is converted)."""
    return data if isinstance(data, Table) else from_frame(data)


def _text_or_none(value: Any) -> str | None:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    text = str(value)
    return None if text in ("<NA>", "NaT") and type(value).__name__ in ("NAType", "NaTType") else text


def parse_number(text: str) -> float | None:
    """The number a text cell holds (surrounding blanks allowed), or None when it is not a number."""
    cell = text.strip()
    if NUMBER.fullmatch(cell):
        return float(cell)
    return _SPECIAL.get(cell.lower())


def to_float(values: NDArray[Any]) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """(numbers, cells that hold text other than a number); empty and missing cells are NaN, not bad."""
    if values.dtype.kind in "fiub":
        return values.astype(np.float64, copy=False), np.zeros(values.shape, dtype=bool)  # read, never written
    out = np.full(values.shape, np.nan)
    bad = np.zeros(values.shape, dtype=bool)
    for i, cell in enumerate(values.tolist()):
        if cell is None:
            continue
        text = str(cell)
        if not text.strip():
            continue
        number = parse_number(text)
        if number is None:
            bad[i] = True
        else:
            out[i] = number
    return out, bad


def integer_kind(cells: list[str]) -> str:
    """ "int" when every cell is a whole number within 64 bits (read as integers, as the general reader
    does), "wide" when they are whole numbers but some do not fit, else "other"."""
    if not all(_INTEGER.fullmatch(c) for c in cells):
        return "other"
    return "int" if all(-(2**63) <= int(c) < 2**63 for c in cells) else "wide"
