"""Read a CSV file chunk by chunk, with the whole-file reader's rules and messages.

The file is opened only through :func:`sitegen.confine.open_inside` (the data folder is untrusted). Its
start decides the layout exactly as for a file read whole (:func:`sitegen.load.read_layout`: separator,
decimal mark, encoding, header checks); the rows are then parsed by pandas' C reader with the same options
(:func:`sitegen.load.pandas_options`) and the same translation of its errors, ``chunk_rows`` at a time.
Measured against pyarrow's streaming CSV reader on this machine (1 M rows × 2 columns, 37 MB): pandas 1.1 s,
pyarrow 2.0 s; pandas also gives exactly the whole-file reader's cell rules (a bad cell becomes text in its
chunk, reported by :func:`sitegen.formula.numeric_columns` with its CSV row).

Differences from the whole-file reader, by necessity: UTF-16/UTF-32 files are refused (they would be
converted whole; the message says so); rows at the very end of the file whose cells are all empty are not
rows (the whole-file reader drops blank lines there; a line of bare separators counts the same here).
The SHA-256 of the bytes read is computed on the way, so a second pass can tell a file that changed.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np

from sitegen.confine import OUTSIDE_HINT, open_inside
from sitegen.errors import DataFileError, DataLimitError, OutsideFolderError
from sitegen.load import FileLayout, drop_unnamed, pandas_errors, pandas_options, read_layout
from sitegen.spec import DatasetSpec, Limits
from sitegen.table import Table, from_frame

HEAD_BYTES = 1 << 20  # the start of the file the layout is decided from


class _Hashing:
    """A binary file that hashes (and counts) every byte read from it."""

    def __init__(self, fh: BinaryIO) -> None:
        self._fh = fh
        self.digest = hashlib.sha256()
        self.size = 0

    def read(self, n: int = -1) -> bytes:
        data = self._fh.read(n)
        self.digest.update(data)
        self.size += len(data)
        return data

    def readable(self) -> bool:
        return True

    def __iter__(self) -> Iterator[bytes]:  # pandas asks whether a handle is iterable
        return iter(self._fh)


@dataclass(frozen=True, slots=True)
class Source:
    """One dataset's CSV file to read in chunks."""

    path: Path
    root: Path | None  # the data folder (None: any plain file, as a path named on the command line)
    name: str  # as the folder lists it, for messages
    spec: DatasetSpec
    limits: Limits
    chunk_rows: int


#: Bytes at the start of a file that tell UTF-16/UTF-32 text (a byte-order mark, or the pattern of zero bytes).
WIDE_HEAD_BYTES = 4096


def file_head(path: Path, root: Path | None, name: str) -> tuple[int, bytes]:
    """The size of the dataset's file and its first WIDE_HEAD_BYTES bytes, opened inside the data folder
    (refused outside it, unread)."""
    try:
        with open_inside(path, root) as fh:
            return os.fstat(fh.fileno()).st_size, fh.read(WIDE_HEAD_BYTES)
    except OutsideFolderError as exc:
        raise DataFileError(f"{name} {exc.message}", hint=OUTSIDE_HINT) from None


@dataclass(slots=True)
class Pass:
    """What one pass over the file found besides its rows: the layout, the bytes' hash, the rows read."""

    layout: FileLayout | None = None
    sha256: str = ""
    rows: int = 0
    size: int = 0  # bytes read


def chunks(src: Source, seen: Pass) -> Iterator[Table]:
    """The file's data rows as tables of at most ``chunk_rows`` rows, numbered by CSV data row (1-based).

    ``seen`` is filled in as the file is read (its hash when the last chunk has been given). Raises
    :class:`DataFileError` / :class:`DataLimitError` as the whole-file reader would.
    """
    import pandas as pd  # noqa: PLC0415

    limits, name = src.limits, src.name
    max_bytes = int(limits.max_megabytes * 1e6)
    try:
        with open_inside(src.path, src.root) as fh:
            size = os.fstat(fh.fileno()).st_size
            if size > max_bytes:
                raise DataLimitError(
                    f"{name} is {size / 1e6:,.1f} MB, over the limit of {max_bytes / 1e6:,.1f} MB",
                    hint="raise [limits] max_megabytes in site.toml if files this large are expected",
                )
            head = fh.read(min(HEAD_BYTES, size))
            _, layout = read_layout(head, src.spec, limits, name)
            if layout.wide:
                raise DataFileError(
                    f"{name} is {layout.wide.upper()} text, which is read only whole, not in chunks",
                    hint="save the file as UTF-8, or raise stream_above_megabytes above its size",
                )
            seen.layout = layout
            fh.seek(0)
            hashing = _Hashing(fh)
            options: dict[str, Any] = pandas_options(
                layout.delimiter, layout.decimal, layout.encoding, skip=layout.skip
            )
            first = 1
            pending: list[Table] = []  # trailing rows with every cell empty, held until more rows follow
            with pandas_errors(name, layout.delimiter, layout.skip):
                handle: Any = hashing  # read as a binary file (read, readable, iteration)
                reader = pd.read_csv(handle, **options, chunksize=src.chunk_rows)
                for raw in reader:
                    raw.columns = [str(c).strip() for c in raw.columns]
                    table = from_frame(drop_unnamed(raw, layout.header, layout.trailing_blank, name, first)[0])
                    table = Table(table.names, table.columns, np.arange(first, first + len(table), dtype=np.int64))
                    first += len(table)
                    if first - 1 > limits.max_rows:
                        raise DataLimitError(
                            f"{name} has more than {limits.max_rows:,} data rows, the limit",
                            hint="raise [limits] max_rows in site.toml if tables this long are expected",
                        )
                    empty = _all_empty(table)
                    if bool(empty.all()):
                        pending.append(table)
                        continue
                    yield from pending
                    pending.clear()
                    last_filled = int(np.flatnonzero(~empty)[-1])
                    if last_filled + 1 < len(table):
                        yield table.take(np.arange(last_filled + 1))
                        pending.append(table.take(np.arange(last_filled + 1, len(table))))
                    else:
                        yield table
                # the rows still pending end the file with nothing in them: not rows
                seen.rows = first - 1 - sum(len(t) for t in pending)
            seen.sha256 = hashing.digest.hexdigest()
            seen.size = hashing.size
    except OutsideFolderError as exc:
        raise DataFileError(f"{name} {exc.message}", hint=OUTSIDE_HINT) from None
    if seen.rows == 0:
        raise DataFileError(f"{name} has a header but no data rows", hint="add data rows below the header")


def _all_empty(table: Table) -> np.ndarray[Any, np.dtype[np.bool_]]:
    """Rows whose every cell is empty."""
    empty = np.ones(len(table), dtype=bool)
    for col in table.columns:
        if col.dtype.kind == "f":
            empty &= np.isnan(col)
        elif col.dtype.kind == "O":
            empty &= np.array([v is None or not str(v).strip() for v in col.tolist()], dtype=bool)
        else:
            return np.zeros(len(table), dtype=bool)
    return empty
