"""Functions of the C library that Python's standard library does not offer (``renameat2``, ``prctl``)."""

from __future__ import annotations

from typing import Any


def c_function(name: str) -> Any | None:
    """The C library's function ``name``, called through ctypes; None where the system has none.

    Looked up among the running program's own symbols, which include the C library's
    (``ctypes.util.find_library`` would cost ~10 ms of imports and a look at the linker cache).
    """
    import ctypes  # noqa: PLC0415 - only a swap and a worker's start-up need it

    try:
        return getattr(ctypes.CDLL(None, use_errno=True), name)
    except (OSError, AttributeError):
        return None


#: From this many rows on, a fit gives its freed memory back to the system before its tables are written.
TRIM_FROM_ROWS = 50_000


def give_back_freed_memory() -> None:
    """Return the heap's free pages to the system (glibc's ``malloc_trim``; elsewhere nothing happens).

    glibc keeps freed blocks below its mapping threshold in the heap, and raises that threshold each time a
    mapped block is freed (up to 32 MB), so after a large fit the heap holds the freed per-row arrays (8 MB per
    million rows each) until the process ends. Trimming once the fit is done keeps the observations writer's
    working memory from adding to them: at a million rows the fit's peak came down by about 90 MB (measured
    with /proc/self/statm). Fixing the threshold instead (``mallopt``) was tried and left: near a fit's memory
    bound it let OpenBLAS, rather than numpy, meet the bound first, and OpenBLAS ends the process.
    """
    trim = c_function("malloc_trim")
    if trim is not None:
        trim(0)
