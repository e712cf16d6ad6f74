"""Read a file only when it lies inside a given folder (the data folder, a theme folder).

The data folder is untrusted: a CSV, sidecar, ``site.toml`` or theme file in it may be a symbolic link
to ``/etc/...``, ``/proc/self/...`` or another user's files. :func:`outside_reason` says why a path may
not be read (it leads out of its folder, or it is not a plain file) without ever opening it, and
:func:`open_inside` opens a file and then asks the kernel which file it actually opened
(``/proc/self/fd``), so a link swapped in between the check and the open is caught too.
Messages name the file as the folder lists it, never its target's content.
"""

from __future__ import annotations

import contextlib
import os
import stat
from collections.abc import Iterator
from pathlib import Path
from typing import BinaryIO

from sitegen.errors import OutsideFolderError

OUTSIDE = "leads outside the {where} (a symbolic link or a path to elsewhere); it is not read"
NOT_PLAIN = "is not a plain file (a device, pipe or folder); it is not read"
OUTSIDE_HINT = "put a copy of the file itself in the data folder if it may be published"


def _real(path: Path | str) -> str:
    return os.path.realpath(path)


def is_inside(path: Path | str, root: Path | str) -> bool:
    """Whether ``path``, after following every link, is ``root`` or lies below it."""
    if _plain_below(path, root):
        return True
    real, top = _real(path), _real(root)
    return real == top or real.startswith(top.rstrip(os.sep) + os.sep)


def _plain_below(path: Path | str, root: Path | str) -> bool:
    """``path`` is ``root`` followed by names none of which is a symbolic link (nor ``.`` or ``..``): then it
    lies below ``root`` wherever ``root`` itself leads. One ``lstat`` a name below ``root``, where resolving both
    paths (``os.path.realpath``, written in Python) took a rebuild with nothing to do 20 ms for 1,000 datasets.
    False when that cannot be shown so (a link, a name that is gone, a path not written below ``root``): then
    the paths are resolved."""
    where, top = os.fspath(path), os.fspath(root).rstrip(os.sep)
    if not top or not where.startswith(top + os.sep):
        return False
    for name in where[len(top) + 1 :].split(os.sep):  # noqa: PTH206 - strings: pathlib costs more than the lstat
        if name in {"", ".", ".."}:
            return False
        top = top + os.sep + name
        try:
            if stat.S_ISLNK(os.lstat(top).st_mode):
                return False
        except OSError:
            return False
    return True


def outside_reason(path: Path, root: Path, where: str = "data folder") -> str | None:
    """Why ``path`` may not be read as a file of ``root`` (None: it may). Opens nothing."""
    if not is_inside(path, root):
        return OUTSIDE.format(where=where)
    try:
        st = os.stat(path)  # noqa: PTH116 - follows links: they now lead inside (no Path object made)
    except OSError:
        return None  # gone or unreadable: the reader reports that in its own words
    if not stat.S_ISREG(st.st_mode):
        return NOT_PLAIN
    return None


def _opened_path(fd: int) -> str | None:
    try:
        return str(Path(f"/proc/self/fd/{fd}").readlink())
    except OSError:  # no /proc: the check before opening stands alone
        return None


@contextlib.contextmanager
def open_inside(path: Path, root: Path | None, where: str = "data folder") -> Iterator[BinaryIO]:
    """Open ``path`` for reading, refusing (:class:`OutsideFolderError`) a file outside ``root`` or not plain.

    ``root`` None opens any plain file (a folder the user named on the command line). ``OSError`` is left to
    the caller. Opened without blocking, so a named pipe put in a file's place cannot hang the build.
    """
    if root is not None:
        reason = outside_reason(path, root, where)
        if reason:
            raise OutsideFolderError(reason)
    fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise OutsideFolderError(NOT_PLAIN)
        if root is not None:
            opened = _opened_path(fd)
            if opened is not None and not is_inside(opened, root):
                raise OutsideFolderError(OUTSIDE.format(where=where))
        os.set_blocking(fd, True)
        fh = os.fdopen(fd, "rb")
    except BaseException:
        os.close(fd)
        raise
    with fh:
        yield fh


def read_inside(path: Path, root: Path | None, limit: int | None = None, where: str = "data folder") -> bytes:
    """The bytes of ``path`` (at most ``limit + 1`` of them when a limit is given), read via :func:`open_inside`."""
    with open_inside(path, root, where) as fh:
        return fh.read() if limit is None else fh.read(limit + 1)


def files_under(folder: Path, where: str = "theme folder") -> list[tuple[str, Path, str | None]]:
    """Every file below ``folder`` as (POSIX relative path, path, why it may not be read or None), sorted.

    Links to folders are not followed (a loop cannot hang); hidden files and folders are left out.
    """
    found: list[tuple[str, Path, str | None]] = []
    for dirpath, dirnames, filenames in os.walk(folder, followlinks=False):
        dirnames[:] = sorted(d for d in dirnames if not d.startswith("."))
        for name in filenames:
            if not name.startswith("."):
                path = Path(dirpath) / name
                found.append((path.relative_to(folder).as_posix(), path, outside_reason(path, folder, where)))
    return sorted(found)


def files_inside(folder: Path) -> Iterator[tuple[str, Path]]:
    """The files of :func:`files_under` that may be read (plain files inside ``folder``)."""
    for rel, path, reason in files_under(folder):
        if reason is None and path.is_file():
            yield rel, path
