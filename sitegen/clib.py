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
