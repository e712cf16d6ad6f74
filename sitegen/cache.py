"""sitegen's folder in the user's cache, and small JSON records kept there between builds.

Everything here is an optimisation only: a missing, unreadable or corrupt record
means the work is done again, never an error. Records are written atomically.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any


def cache_dir() -> Path:
    """sitegen's folder in the user's cache (``$XDG_CACHE_HOME/sitegen`` or ``~/.cache/sitegen``)."""
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "sitegen"


def read_record(name: str) -> Any:
    """The JSON value stored under ``name``, or None."""
    try:
        return json.loads((cache_dir() / name).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def write_record(name: str, value: Any) -> None:
    """Store a JSON value under ``name`` (silently skipped when the cache cannot be written)."""
    target = cache_dir() / name
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        tmp = target.with_name(f".{target.name}.{os.getpid()}.tmp")
        tmp.write_text(json.dumps(value, sort_keys=True), encoding="utf-8")
        tmp.replace(target)
    except OSError:
        pass
