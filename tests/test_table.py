"""The small column table between reader, formula and derive: text-to-number rules and conversion from pandas.

pandas' ``to_numeric(errors="coerce")`` is the reference for which text cells count as numbers
(the rule the general reader applied before the table existed).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from sitegen.table import from_columns, from_frame, parse_number, to_float

CELLS = ["1", " 2.5 ", "-3e2", "+.5", "7.", "inf", "-inf", "Infinity", "", "   ", "abc", "1,5", "1_000", "0x1A", "nan",
         "\u0661\u0662"]  # fmt: skip


def test_text_cells_count_as_numbers_as_pandas_counts_them() -> None:
    values = np.array([*CELLS, None], dtype=object)
    numbers, bad = to_float(values)
    text = pd.Series(values, dtype="string")
    ref = pd.to_numeric(text.str.strip(), errors="coerce")
    ref_bad = ref.isna() & text.notna() & (text.fillna("").str.strip() != "")
    assert bad.tolist() == ref_bad.tolist()
    for got, want in zip(numbers.tolist(), ref.tolist(), strict=True):
        if want is None or (isinstance(want, float) and math.isnan(want)) or want is pd.NA:
            assert math.isnan(got)
        else:
            assert got == want


def test_parse_number_refuses_what_is_not_a_number() -> None:
    assert parse_number(" 12.5 ") == 12.5
    assert parse_number("-INF") == -math.inf
    for text in ("", "nan", "1 2", "--1", "1e", "e5", "\u0661\u0662"):  # the last: Arabic-Indic digits
        assert parse_number(text) is None, text


def test_from_frame_keeps_types_and_row_numbers() -> None:
    """Numbers keep their type; booleans (pandas reads the words True/False so) become the words again."""
    frame = pd.DataFrame(
        {"i": [1, 2, 3], "f": [1.5, np.nan, 3.0], "t": ["a", None, "c"], "b": [True, False, True]},
        index=pd.RangeIndex(1, 4),
    )
    table = from_frame(frame)
    assert table.names == ("i", "f", "t", "b")
    assert [c.dtype.kind for c in table.columns] == ["i", "f", "O", "O"]
    assert table["t"].tolist() == ["a", None, "c"]
    assert table["b"].tolist() == ["True", "False", "True"]
    assert table.rows.tolist() == [1, 2, 3]


def test_take_and_assign() -> None:
    table = from_columns({"x": np.array([1.0, 2.0, 3.0]), "y": np.array([4.0, 5.0, 6.0])}, rows=[2, 3, 5])
    kept = table.take(np.array([True, False, True]))
    assert kept.rows.tolist() == [2, 5]
    assert kept["y"].tolist() == [4.0, 6.0]
    grown = kept.assign("g", np.array(["a", "b"], dtype=object))
    assert grown.names == ("x", "y", "g")
    assert len(grown) == 2
    assert "g" in grown
    with pytest.raises(ValueError, match="not in tuple"):
        grown["missing"]
