"""The spare: the build folder beside the published site, holding the site before the previous one.

A build updates the spare in place and then exchanges it with the published folder (see
:mod:`sitegen.publish`), because creating files costs far more than rewriting them on this machine. Here the
spare is opened: its record read, then unsealed and cleared of anything a site of ours cannot hold.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from sitegen.records import DatasetRecord, FileStat, read_previous


@dataclass(frozen=True, slots=True)
class Spare:
    """The build folder as the build before the previous one left it (see :mod:`sitegen.publish`)."""

    entries: Mapping[str, DatasetRecord]  # its build.json's datasets when it may be trusted, else empty
    recorded: dict[str, dict[str, FileStat]]  # its build.json's file manifest by dataset folder
    folders: dict[str, dict[str, FileStat]]  # what its dataset folders hold now, by file name


def open_spare(work: Path, *, trusted: bool) -> Spare:
    """Read the spare's record, then unseal it and clear out what a site of ours cannot hold.

    Its build.json goes first: a build killed while updating the spare leaves one that is never
    trusted again. The site-wide files go too (every build writes them anew), and so do symbolic
    links and other odd entries. Nothing in the spare is ever rewritten in place: a file is
    replaced by a new one, so whoever still reads a file of an earlier site keeps reading it whole,
    and nothing written here can change a file elsewhere (a ``cp -al`` backup, say).
    """
    entries: Mapping[str, DatasetRecord] = {}
    recorded: dict[str, dict[str, FileStat]] = {}
    if trusted:
        spare = read_previous(work)
        if spare.record is not None:
            entries, recorded = spare.entries, spare.record.files_by_folder()
    remove(work / "build.json")
    folders: dict[str, dict[str, FileStat]] = {}
    with os.scandir(work) as top:
        for entry in top:
            if entry.name == "datasets" and entry.is_dir(follow_symlinks=False):
                with os.scandir(entry.path) as sets:
                    for folder in sets:
                        if folder.is_dir(follow_symlinks=False):
                            folders[folder.name] = _own_files(folder.path, nested=False)
                        else:
                            remove(Path(folder.path))
            elif entry.is_dir(follow_symlinks=False):
                _own_files(entry.path, nested=True)
            elif entry.name not in _KEEP_AT_TOP or not entry.is_file(follow_symlinks=False):
                remove(Path(entry.path))
    return Spare(entries, recorded, folders)


_KEEP_AT_TOP = (".sitegen",)  # the marker (publish.py)


def _own_files(folder: str, *, nested: bool) -> dict[str, FileStat]:
    """Size, time and inode of the plain, singly linked files in ``folder``; removes anything else
    (sub-folders unless ``nested``)."""
    out: dict[str, FileStat] = {}
    with os.scandir(folder) as entries:
        for entry in entries:
            if entry.is_dir(follow_symlinks=False):
                if nested:
                    _own_files(entry.path, nested=True)
                else:
                    remove(Path(entry.path))
                continue
            st = entry.stat(follow_symlinks=False) if entry.is_file(follow_symlinks=False) else None
            if st is None or st.st_nlink > 1:
                remove(Path(entry.path))
            else:
                out[entry.name] = FileStat(st.st_size, st.st_mtime_ns, st.st_ino, st.st_ctime_ns)
    return out


def remove(path: Path) -> None:
    """Delete a file, link or folder tree, if there."""
    if path.is_dir() and not path.is_symlink():
        import shutil  # noqa: PLC0415 - not needed by a rebuild with nothing to do

        shutil.rmtree(path, ignore_errors=True)
    else:
        with contextlib.suppress(OSError):
            path.unlink(missing_ok=True)
