"""The plain-file reader and pandas' C reader give the same table for every file both can read.

Every CSV of the broken-input corpus, the NIST reference data, the textbook data and the
example project is read both ways (pandas is the independent reference); where the plain
reader declines a file, the general reader alone is used, so only agreement is tested here.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sitegen.errors import DatasetError
from sitegen.load import _parse, drop_unnamed, read_plain, read_table
from sitegen.spec import DatasetSpec, Limits
from sitegen.table import from_frame

ROOT = Path(__file__).resolve().parent.parent
FILES = sorted(
    p for folder in ("tests/corpus", "tests/data", "example_project") for p in (ROOT / folder).rglob("*.csv")
)


def _spec() -> DatasetSpec:
    return DatasetSpec()


@pytest.mark.parametrize("path", FILES, ids=[p.relative_to(ROOT).as_posix() for p in FILES])
def test_plain_and_general_readers_agree(path: Path) -> None:
    raw = path.read_bytes()
    try:
        loaded = read_table(raw, _spec(), Limits(), path.name)
    except DatasetError:  # a refused file: nothing to compare
        return
    plain = read_plain(raw, loaded.delimiter, skip=0, width=len(loaded.table.names))
    if plain is None or b"sep=" in raw[:8]:
        return
    frame = _parse(raw, loaded.delimiter, ".", "utf-8-sig", path.name, skip=0, max_rows=10**7)
    frame, _ = drop_unnamed(frame, list(frame.columns), 0, path.name)
    general = from_frame(frame)
    assert plain.names == general.names
    assert len(plain) == len(general)
    for name, a, b in zip(plain.names, plain.columns, general.columns, strict=True):
        assert a.dtype.kind == b.dtype.kind, name
        np.testing.assert_array_equal(a, b, err_msg=f"{path.name}: {name}")


def test_the_plain_reader_reads_the_common_files() -> None:
    """Most real files are plain: the reference and example data must not all fall back to pandas."""
    plain = 0
    for path in FILES:
        if "corpus" in path.parts:
            continue
        raw = path.read_bytes()
        loaded = read_table(raw, _spec(), Limits(), path.name)
        plain += read_plain(raw, loaded.delimiter, skip=0, width=len(loaded.table.names)) is not None
    assert plain >= 10


@pytest.mark.parametrize(
    "text",
    [
        "x,y\n1,2\n3,4\n",  # integers stay integers
        "x,y\n1,2\n3,\n",  # a gap makes a float column
        "x,y\n1.5,-2e3\n+.5,7.\n",
        "x;y\n1;2\n3;4\n",
        "x\ty\n1\t2\n",
        "x,y\r\n1,2\r\n3,4\r\n",
        "x,y\n1,2\n3,4",  # no line end at the end
        "\ufeffx,y\n1,2\n",
    ],
)
def test_small_plain_files_match_pandas(text: str) -> None:
    raw = text.encode("utf-8")
    loaded = read_table(raw, _spec(), Limits(), "t.csv")
    frame = _parse(raw, loaded.delimiter, ".", "utf-8-sig", "t.csv", skip=0, max_rows=10**7)
    general = from_frame(frame)
    assert read_plain(raw, loaded.delimiter, skip=0, width=2) is not None
    assert loaded.table.names == general.names
    for a, b in zip(loaded.table.columns, general.columns, strict=True):
        assert a.dtype.kind == b.dtype.kind
        np.testing.assert_array_equal(a, b)


def test_whole_numbers_beyond_64_bits_go_to_the_general_reader() -> None:
    raw = b"x,y\n99999999999999999999,1\n2,3\n"
    assert read_plain(raw, ",", skip=0, width=2) is None


@pytest.mark.parametrize(
    "raw",
    [
        b"x,g\n18446744073709551616,1\n1.5,2\n",  # a wide whole number among decimals: pandas reads text
        "\ufeff\ufeffx,\ufeffx\n1,2\n3,4\n".encode(),  # a doubled byte-order mark
    ],
)
def test_files_the_plain_reader_leaves_to_pandas_or_reads_as_pandas(raw: bytes) -> None:
    loaded = read_table(raw, _spec(), Limits(), "t.csv")
    plain = read_plain(raw, ",", skip=0, width=len(loaded.table.names))
    frame = _parse(raw, ",", ".", "utf-8-sig", "t.csv", skip=0, max_rows=10**7)
    general = from_frame(frame)
    if plain is not None:
        assert plain.names == general.names
        for a, b in zip(plain.columns, general.columns, strict=True):
            assert a.dtype.kind == b.dtype.kind
            np.testing.assert_array_equal(a, b)
    assert loaded.table.names == general.names
