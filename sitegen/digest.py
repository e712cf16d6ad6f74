"""SHA-256 of bytes and of files: the one hashing helper of inputs, stored results and pages."""

from __future__ import annotations

import hashlib
from pathlib import Path


def sha256_hex(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def file_sha256(path: Path) -> str:
    """SHA-256 of a file read in chunks (a file far over the size limit is never held in memory)."""
    with path.open("rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()
