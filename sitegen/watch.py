"""Rebuild a site whenever the data folder changes.

Polls the folder (no platform file-watching dependency): a change starts a
countdown, and the build runs once the folder has been quiet for ``settle``
seconds, so a file still being copied or saved is not read half-written.
Editor temporary files (``~`` suffix, ``.swp``, ``#name#``, hidden files) are
ignored. A failed build never ends the watch.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from pathlib import Path

Snapshot = dict[str, tuple[int, int]]
RETRY = -1  # what a build callable returns when it should be tried again soon
_TEMP_SUFFIXES = ("~", ".swp", ".swx", ".tmp", ".part", ".crdownload")


def _ignored(name: str) -> bool:
    return name.startswith((".", "#", "~$")) or name.endswith(_TEMP_SUFFIXES)


def snapshot(data_dir: Path) -> Snapshot:
    """Size and modification time of every relevant file under the data folder."""
    state: Snapshot = {}
    for dirpath, dirnames, filenames in os.walk(data_dir, followlinks=False):
        dirnames[:] = sorted(d for d in dirnames if not _ignored(d))
        for name in filenames:
            if _ignored(name):  # data, sidecars, site.toml and a theme folder kept in the data folder
                continue
            path = Path(dirpath) / name
            try:
                st = path.stat()
            except OSError:
                continue  # vanished between listing and stat
            state[path.relative_to(data_dir).as_posix()] = (st.st_size, st.st_mtime_ns)
    return state


def watch(
    data_dir: Path,
    build: Callable[[], int],
    *,
    interval: float = 1.0,
    settle: float = 1.5,
    max_builds: int | None = None,
    clock: Callable[[], float] = time.monotonic,
    sleep: Callable[[float], None] = time.sleep,
) -> int:
    """Build after every settled change; returns the number of builds (for tests).

    The caller builds once before watching. ``build`` returns :data:`RETRY` when it could
    not run (another build held the output folder); the watch then tries again after
    ``settle`` seconds instead of waiting for the next change.
    """
    builds = 0
    last = snapshot(data_dir)
    changed_at: float | None = None
    while max_builds is None or builds < max_builds:
        sleep(interval)
        now = snapshot(data_dir)
        if now != last:
            last = now
            changed_at = clock()
            continue
        if changed_at is not None and clock() - changed_at >= settle:
            changed_at = None
            if build() == RETRY:
                changed_at = clock()
            builds += 1
    return builds
