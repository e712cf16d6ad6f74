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


#: glibc's ``mallopt`` parameter for the size from which blocks are mapped on their own (malloc.h).
_M_MMAP_THRESHOLD = -3
#: Blocks from this size on (a column of 32,768 floats) get pages of their own, given back when freed.
MMAP_FROM_BYTES = 256 * 1024


def give_back_large_blocks() -> None:
    """Have freed large arrays returned to the system at once (glibc; elsewhere nothing happens).

    glibc raises its mapping threshold each time a mapped block is freed, up to 32 MB; after that, the
    per-row arrays of a large fit (8 MB per million rows) come from the heap, whose freed middle is kept by
    the process. A fit of a million rows then held about 90 MB more than its live arrays at its peak
    (measured with /proc/self/statm against tracemalloc). A fixed threshold keeps every such array mapped.
    """
    mallopt = c_function("mallopt")
    if mallopt is not None:
        mallopt(_M_MMAP_THRESHOLD, MMAP_FROM_BYTES)
