"""Installed versions of the libraries that shape a build's numbers and pages."""

from __future__ import annotations

import functools
import os
import sys
from collections.abc import Sequence


def library_versions(names: Sequence[str]) -> dict[str, str]:
    """Installed versions of the named distributions."""
    found = _dist_info_versions()
    out = {}
    for name in names:
        version = found.get(_normalised(name))
        if version is None:  # not a plain .dist-info folder on sys.path: ask the metadata machinery
            from importlib import metadata  # noqa: PLC0415 - costs more to import than the scan below

            try:
                version = metadata.version(name)
            except metadata.PackageNotFoundError:
                version = "unknown"
        out[name] = version
    return out


def _normalised(name: str) -> str:
    return name.lower().replace("-", "_").replace(".", "_")


@functools.cache
def _dist_info_versions() -> dict[str, str]:
    """Versions from the names of ``NAME-VERSION.dist-info`` folders on sys.path; the first one found wins."""
    out: dict[str, str] = {}
    for entry in sys.path:
        try:
            names = os.listdir(entry or ".")  # noqa: PTH208 - names only; Path objects cost more here
        except OSError:
            continue
        for folder in names:
            if folder.endswith(".dist-info"):
                dist, _, version = folder[: -len(".dist-info")].rpartition("-")
                if dist and version:
                    out.setdefault(_normalised(dist), version)
    return out
