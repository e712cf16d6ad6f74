"""Large per-row tables (observations.csv above the workbook's row limit) written fast, in chunks.

The bytes are those of :func:`sitegen.report.tables.rows_to_csv_bytes` for the same cells: every float
as Python's shortest round-trip ``repr``, NaN and ±inf as empty cells, integers as ``str``, text cells
neutralised for spreadsheets and quoted by the csv module's minimal rule, LF line ends.

Why not pandas or the csv module (measured on this machine class, 1 M rows × 14 columns): pandas'
``to_csv`` takes about 12–22 s and the csv module about as long; Python's ``repr`` of every float alone
is ≈ 2.4 s per million values. pyarrow turns floats into their shortest round-trip digits in C++ (its
``cast`` to string) ≈ 1.7× faster than ``repr`` and joins the cells of a row in C++, so a whole table is
written in about a fifth of pandas' time (``bench/large.py`` prints the figures). pyarrow spells some
numbers differently from ``repr`` (``3`` for ``3.0``, ``0.00001`` for ``1e-05``, ``1.5e+15`` for
``1500000000000000.0``); those cells are put right here: a missing ``.0`` is added to integral values,
and every cell pyarrow wrote with an exponent, or whose magnitude puts ``repr`` into exponent notation
(below 1e-4 or from 1e16 on), is written with ``repr`` itself. ``tests/test_bulkcsv.py`` checks the
bytes against :func:`rows_to_csv_bytes` and pandas on real data and on the awkward values.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any, BinaryIO

import numpy as np

from sitegen.report.tables import neutralise, one_line_end

if TYPE_CHECKING:
    import pyarrow as pa

CHUNK_ROWS = 65_536  # rows formatted at a time: about 17 MB of text for 14 columns
_POSITIONAL_LOW = 1e-4  # repr writes magnitudes in [1e-4, 1e16) without an exponent
_POSITIONAL_HIGH = 1e16
# Powers of ten as Python parses them (correctly rounded): numpy's array power is not (numpy 2.4 gives
# 10.0 ** -5 as 9.999999999999999e-06), and this writer places a value by comparing it with them.
_POW10_LOW = -400
_POW10 = np.array([float(f"1e{k}") for k in range(_POW10_LOW, 401)])


def _pow10(k: np.ndarray[Any, Any] | int) -> np.ndarray[Any, Any]:
    """10^k, correctly rounded, for integer ``k`` (0 below 1e-400, inf above 1e400)."""
    return np.asarray(_POW10[np.clip(np.asarray(k, dtype=np.int64) - _POW10_LOW, 0, _POW10.size - 1)])


def can_write(values: Sequence[np.ndarray[Any, Any]]) -> bool:
    """True when every column is float64 (or narrower), integer, or text (Python ``str`` cells)."""
    for arr in values:
        kind = arr.dtype.kind
        if (kind == "f" and arr.dtype.itemsize <= 8) or kind in "iu":
            continue
        if kind == "O" and set(map(type, arr.tolist())) <= {str}:
            continue
        return False
    return True


def _csv_cell(text: str) -> str:
    """A cleaned text cell as the csv module writes it (quoted when it holds , " or a line end)."""
    text = one_line_end(neutralise(text))
    if any(c in text for c in ',"\n'):
        return '"' + text.replace('"', '""') + '"'
    return text


@functools.cache
def _arrow_positional() -> tuple[int, int]:
    """The decimal exponents (low, high) between which pyarrow writes a float without an exponent.

    Asked of pyarrow once (it is 1e-6 ≤ |x| < 1e10 for pyarrow 14–26), so that a different rule in
    another version is followed rather than assumed.
    """
    import pyarrow as pa  # noqa: PLC0415
    import pyarrow.compute as pc  # noqa: PLC0415

    exps = list(range(-30, 31))
    texts = pc.cast(pa.array(_pow10(np.array(exps))), pa.string()).to_pylist()
    plain = [k for k, t in zip(exps, texts, strict=True) if "e" not in t]
    return min(plain), max(plain) + 1


def _floats(arr: np.ndarray[Any, Any]) -> pa.Array:
    """Shortest round-trip text of every float, spelt as ``repr`` spells it (empty for NaN/±inf).

    Which spelling a cell has follows from its magnitude alone: a double below the double nearest
    10^k has a shortest decimal below 10^k, so comparing with powers of ten gives its decimal exponent.
    """
    import pyarrow as pa  # noqa: PLC0415
    import pyarrow.compute as pc  # noqa: PLC0415

    values = np.asarray(arr, dtype=np.float64)
    finite = np.isfinite(values)
    low, high = _arrow_positional()
    text = pc.cast(pa.array(values), pa.string())
    with np.errstate(invalid="ignore"):
        mag = np.abs(values)
        nonzero = finite & (mag != 0)
        arrow_plain = ~nonzero | ((mag >= _pow10(low)) & (mag < _pow10(high)))
        repr_plain = ~nonzero | ((mag >= _POSITIONAL_LOW) & (mag < _POSITIONAL_HIGH))
        integral = values == np.trunc(values)
    # both without an exponent: repr writes integral values with ".0", pyarrow without
    text = _where(
        text, finite & arrow_plain & repr_plain & integral, lambda t: pc.binary_join_element_wise(t, ".0", "")
    )
    # both with an exponent: repr writes at least two digits (1e-07, pyarrow 1e-7); |exponent| < 10 here
    one_digit = nonzero & ~arrow_plain & ~repr_plain & (mag >= 1e-9) & (mag < 1e10)
    text = _where(text, one_digit, _two_digit_exponent)
    # pyarrow without, repr with an exponent (e.g. 0.000015 → 1.5e-05)
    to_exp = nonzero & arrow_plain & ~repr_plain
    if to_exp.any():
        if bool((mag[to_exp] >= 1).any()) or low < -9:
            raise ValueError("pyarrow writes floats in a form this writer does not know")  # not with 14–26
        exponent = np.floor(np.log10(mag[to_exp])).astype(np.int64)  # corrected against powers of ten:
        exponent += (mag[to_exp] >= _pow10(exponent + 1)).astype(np.int64)
        exponent -= (mag[to_exp] < _pow10(exponent)).astype(np.int64)
        picked = pc.take(text, pa.array(np.flatnonzero(to_exp)))
        text = pc.replace_with_mask(text, pa.array(to_exp), _small_to_exponent(picked, exponent))
    # pyarrow with, repr without an exponent (from 1e10 on): repr itself
    by_repr = nonzero & ~arrow_plain & repr_plain
    if by_repr.any():
        picked_values = values[by_repr].tolist()
        text = pc.replace_with_mask(text, pa.array(by_repr), pa.array([repr(v) for v in picked_values]))
    if not finite.all():
        text = pc.if_else(pa.array(~finite), "", text)
    return text


def _where(text: pa.Array, mask: np.ndarray[Any, Any], change: Callable[[pa.Array], pa.Array]) -> pa.Array:
    """``text`` with the cells under ``mask`` passed through ``change`` (only those cells are touched)."""
    import pyarrow as pa  # noqa: PLC0415
    import pyarrow.compute as pc  # noqa: PLC0415

    if not mask.any():
        return text
    if mask.all():
        return change(text)
    picked = pa.array(np.flatnonzero(mask))
    return pc.replace_with_mask(text, pa.array(mask), change(pc.take(text, picked)))


def _two_digit_exponent(text: pa.Array) -> pa.Array:
    """``1.5e-7`` → ``1.5e-07`` (cells whose exponent has one digit)."""
    import pyarrow.compute as pc  # noqa: PLC0415

    head = pc.utf8_slice_codeunits(text, 0, -1)
    return pc.binary_join_element_wise(head, pc.utf8_slice_codeunits(text, -1), "0")


def _small_to_exponent(text: pa.Array, exponent: np.ndarray[Any, Any]) -> pa.Array:
    """``0.000015`` → ``1.5e-05``: positional numbers below 1 with their decimal ``exponent`` (< 0)."""
    import pyarrow as pa  # noqa: PLC0415
    import pyarrow.compute as pc  # noqa: PLC0415

    negative = pc.starts_with(text, "-")
    digits = pc.utf8_ltrim(pc.replace_substring(pc.utf8_ltrim(text, "-"), ".", ""), "0")
    first = pc.utf8_slice_codeunits(digits, 0, 1)
    rest = pc.utf8_slice_codeunits(digits, 1)
    mantissa = pc.if_else(pc.equal(rest, ""), first, pc.binary_join_element_wise(first, rest, "."))
    mantissa = pc.if_else(negative, pc.binary_join_element_wise("-", mantissa, ""), mantissa)
    suffix = pa.array([f"e-{-int(k):02d}" for k in exponent.tolist()]) if exponent.size < 64 else None
    if suffix is None:
        table = np.array([f"e-{k:02d}" for k in range(100)], dtype=object)
        suffix = pa.array(table[np.clip(-exponent, 0, 99)], type=pa.string())
    return pc.binary_join_element_wise(mantissa, suffix, "")


def _column(arr: np.ndarray[Any, Any]) -> pa.Array:
    import pyarrow as pa  # noqa: PLC0415
    import pyarrow.compute as pc  # noqa: PLC0415

    kind = arr.dtype.kind
    if kind == "f":
        return _floats(arr)
    if kind in "iu":
        return pc.cast(pa.array(arr), pa.string())
    seen: dict[str, str] = {}
    cells = [seen[v] if v in seen else seen.setdefault(v, _csv_cell(v)) for v in arr.tolist()]
    return pa.array(cells, type=pa.string())


def _header(columns: Sequence[str]) -> bytes:
    from sitegen.report.tables import rows_to_csv_bytes  # noqa: PLC0415

    return rows_to_csv_bytes([one_line_end(neutralise(str(c))) for c in columns], [])


def write_csv(columns: Sequence[str], values: Sequence[np.ndarray[Any, Any]], path: Path) -> None:
    """Write the table to ``path`` chunk by chunk; the columns must pass :func:`can_write`."""
    n = len(values[0]) if values else 0
    with path.open("wb") as fh:
        fh.write(_header(columns))
        for start in range(0, n, CHUNK_ROWS):
            write_rows(fh, [arr[start : start + CHUNK_ROWS] for arr in values])


def write_header(fh: BinaryIO, columns: Sequence[str]) -> None:
    """The header line of a table written by :func:`write_rows` (rows may then come a chunk at a time)."""
    fh.write(_header(columns))


def write_rows(fh: BinaryIO, values: Sequence[np.ndarray[Any, Any]]) -> None:
    """Append rows (columns of equal length, passing :func:`can_write`) to a table being written."""
    import pyarrow as pa  # noqa: PLC0415
    import pyarrow.compute as pc  # noqa: PLC0415

    n = len(values[0]) if values else 0
    for start in range(0, n, CHUNK_ROWS):
        cells = [_column(arr[start : start + CHUNK_ROWS]) for arr in values]
        if len(cells) == 1:  # the csv module writes a lone empty cell as ""
            cells[0] = pc.if_else(pc.equal(cells[0], ""), '""', cells[0])
        lines = pc.binary_join_element_wise(*cells, ",") if len(cells) > 1 else cells[0]
        lines = pc.binary_join_element_wise(lines, pa.scalar(""), "\n")
        fh.write(_text_bytes(lines))
        del cells, lines
        pa.default_memory_pool().release_unused()  # mimalloc keeps freed chunks: a chunk's text, many times over


def _text_bytes(lines: pa.Array) -> memoryview:
    """The concatenated bytes of a string array without nulls (no copy)."""
    _, offsets_buf, data = lines.buffers()
    offsets = np.frombuffer(offsets_buf, dtype=np.int32)
    first, last = int(offsets[lines.offset]), int(offsets[lines.offset + len(lines)])
    return memoryview(data)[first:last]
