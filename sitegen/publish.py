"""Write a site safely: refuse unsafe output folders, build beside, swap in whole.

The site is built in a folder next to the output folder (``.NAME.sitegen-build``),
guarded by a lock file beside it. When the build is complete the two folders are
exchanged atomically (Linux ``renameat2(RENAME_EXCHANGE)``; elsewhere two renames
with recovery), so a reader, a crash or ``kill -9`` at any moment sees either the
old site or the new one, never a mixture.

After the exchange the build folder holds the previous site. It is kept as the
*spare*: the next build brings it up to date (datasets that did not change since
it was published stay as they are, changed files are replaced, what is gone is
deleted) and exchanges again, instead of making a new folder tree of ~1,400
entries and deleting the old one each time (a new file or folder cost
0.07–0.9 ms on the machine we measure on). No file is ever rewritten in place —
a changed file is a new file — so a reader who still has a file of an earlier
site open keeps reading it whole, and the spare shares no file with the
published site (no hard links). Deleting the spare only makes the next build
slower.
"""

from __future__ import annotations

import contextlib
import fcntl
import os
import re
from collections.abc import Iterator
from pathlib import Path

from sitegen.errors import BuildLockedError, OutputFolderError, OutsideFolderError, PackError

MARKER = ".sitegen"
MARKER_TEXT = "This folder was made by sitegen. Each build replaces it whole; do not keep other files here.\n"


def _resolved(path: Path, what: str) -> Path:
    """``path`` with every symbolic link followed; a link that loops is refused by name."""
    try:
        return path.resolve()
    except (RuntimeError, OSError) as exc:  # Python 3.11 raises RuntimeError for a loop, later ones OSError
        raise OutputFolderError(
            f"the {what} {path} cannot be followed: a symbolic link on its way loops back on itself",
            hint=f"remove or correct the link, or give another {what}",
        ) from exc


def check_output_folder(data_dir: Path, out_dir: Path) -> None:
    """Refuse an output folder that overlaps the data folder or holds files sitegen did not make."""
    data = _resolved(data_dir, "data folder")
    out = _resolved(out_dir, "output folder")
    if out == data or out.is_relative_to(data):
        raise OutputFolderError(
            f"the output folder {out_dir} is inside the data folder {data_dir}",
            hint="choose an output folder outside the data folder, e.g. next to it",
        )
    if data.is_relative_to(out):
        raise OutputFolderError(
            f"the output folder {out_dir} contains the data folder {data_dir}",
            hint="choose an output folder that does not contain your data",
        )
    if out.exists() and not out.is_dir():
        raise OutputFolderError(f"the output path {out_dir} exists and is not a folder")
    if out.is_dir() and any(out.iterdir()) and not (out / MARKER).is_file():
        raise OutputFolderError(
            f"the output folder {out_dir} is not empty and was not made by sitegen; nothing was touched",
            hint="choose a new or empty folder; sitegen replaces its output folder whole on every build",
        )


def output_error(exc: OSError, out_dir: Path) -> OutputFolderError:
    """What to tell the user when writing the site failed (the published site is unchanged)."""
    import errno  # noqa: PLC0415

    where = str(exc.filename) if exc.filename else str(out_dir)
    code = exc.errno
    if code in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
        why = "is full" if code != errno.EFBIG else "allows no file that large (a file-size limit)"
        detail = f"{exc.strerror}: {exc.filename}" if exc.filename else exc.strerror
        return OutputFolderError(
            f"the disk holding {out_dir} {why} ({detail}); the published site is unchanged",
            hint="free some space there (or choose another output folder with -o) and build again; "
            "what this build had written was removed",
        )
    if code == errno.EROFS:
        return OutputFolderError(
            f"{where} is on a read-only disk; the published site is unchanged",
            hint="choose an output folder on a disk you can write to with -o",
        )
    if code in (errno.EACCES, errno.EPERM):
        return OutputFolderError(
            f"no permission to write {where}; the published site is unchanged",
            hint="choose an output folder you may write to with -o, or ask for write access to it",
        )
    if code == errno.ELOOP:
        return OutputFolderError(
            f"{where} cannot be followed: a symbolic link on its way loops back on itself",
            hint="remove or correct the link, or choose another output folder with -o",
        )
    if code == errno.ENAMETOOLONG:
        return OutputFolderError(
            f"a path in the site is too long for the file system: {where[:120]}…",
            hint="choose an output folder with a shorter path, or shorten the data folder's sub-folder names",
        )
    return OutputFolderError(
        f"the site could not be written ({exc.strerror or exc}: {where}); the published site is unchanged",
        hint="check the output folder and the disk, then build again",
    )


def marker_intact(site: Path) -> bool:
    """The site's marker is a plain file (not a link to something else) saying what sitegen writes."""
    marker = site / MARKER
    try:
        return not marker.is_symlink() and marker.read_text(encoding="utf-8") == MARKER_TEXT
    except (OSError, ValueError):
        return False


def write_new(path: Path, data: bytes | str) -> None:
    """Write ``data`` to a new file at ``path``, never into the file that is there (see the module's docstring)."""
    path.unlink(missing_ok=True)
    if isinstance(data, str):
        path.write_text(data, encoding="utf-8")
    else:
        path.write_bytes(data)


def copy_new(src: Path, dst: Path) -> None:
    """Copy ``src`` to a new file at ``dst``, never into the file that is there."""
    dst.unlink(missing_ok=True)
    import shutil  # noqa: PLC0415 - not needed by a rebuild with nothing to do

    shutil.copyfile(src, dst)


def build_dir_for(out_dir: Path) -> Path:
    """The build folder beside the output folder (between builds: the spare, the previous site)."""
    out = out_dir.resolve()
    return out.parent / f".{out.name}.sitegen-build"


def lock_path_for(out_dir: Path) -> Path:
    """The lock file of the build folder, beside the output folder (removed when a build ends)."""
    out = out_dir.resolve()
    return out.parent / f".{out.name}.sitegen-build.lock"


_held = -1  # the descriptor of the lock this process holds, if any


def _close_in_child() -> None:
    """A forked worker does not keep the build lock: once the build's own process is gone
    (ended or killed), the lock is free at once, however long its workers take to follow."""
    if _held >= 0:
        os.close(_held)


os.register_at_fork(after_in_child=_close_in_child)


def _acquire(lock: Path) -> int:
    """An exclusive, non-blocking ``flock`` on ``lock``; returns the descriptor, or -1 when held elsewhere.

    A build removes its lock file when it ends, so after locking we check that the path still
    names the file we locked (else another build replaced it and we try again).
    """
    for _ in range(20):
        try:  # never through a link: a link in the lock's place could make the build create or lock another file
            fd = os.open(lock, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW | os.O_CLOEXEC, 0o644)
        except OSError as exc:
            if not lock.is_symlink():
                raise
            raise BuildLockedError(
                f"the build lock {lock} is a symbolic link; sitegen does not follow it",
                hint="remove the link (no sitegen build makes one) and build again",
            ) from exc
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            return -1
        try:
            same = lock.stat().st_ino == os.fstat(fd).st_ino
        except FileNotFoundError:
            same = False
        if same:
            return fd
        os.close(fd)
    raise BuildLockedError(f"cannot take the build lock {lock.name}", hint="try again")


class BuildFolder:
    """The build folder of a build that holds the lock (:func:`build_folder`): made only when :meth:`open` is
    called, so that a build with nothing to do makes, writes and removes nothing beside the site but its lock."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.opened = False

    def open(self) -> Path:
        """The build folder, made (or kept: the spare) on the first call; anything at its path that is not a
        plain folder is removed first."""
        if not self.opened:
            work = self.path
            if work.is_symlink() or (work.exists() and not work.is_dir()):
                work.unlink()
            work.mkdir(exist_ok=True)
            self.opened = True
        return self.path


@contextlib.contextmanager
def build_folder(out_dir: Path) -> Iterator[BuildFolder]:
    """Lock the output folder and name the build folder beside it; release the lock however the build ends.

    The lock is an ``flock`` on a small file beside the output folder, so the kernel releases it if the build
    is killed; the file holds the process id of its owner, which a build refused meanwhile names. The build
    folder is kept (see the module's docstring) and made only when the build opens it.
    """
    work = build_dir_for(out_dir)
    lock = lock_path_for(out_dir)
    try:
        work.parent.mkdir(parents=True, exist_ok=True)
        fd = _acquire(lock)
    except OSError as exc:
        raise output_error(exc, out_dir) from exc
    global _held  # noqa: PLW0603 - the fork hook needs it
    if fd < 0:
        owner = _read_owner(lock)
        who = f" (process {owner})" if owner else ""
        raise BuildLockedError(
            f"another sitegen build{who} is writing {out_dir}",
            hint="wait for it to finish, or stop it; the published site is not affected",
        )
    _held = fd
    folder = BuildFolder(work)
    try:
        os.ftruncate(fd, 0)  # a lock file left by a killed build may hold its id
        os.pwrite(fd, str(os.getpid()).encode(), 0)
        yield folder
    except OSError as exc:
        import errno  # noqa: PLC0415

        if exc.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):  # give the space back (the spare goes too)
            import shutil  # noqa: PLC0415

            shutil.rmtree(work, ignore_errors=True)
        raise output_error(exc, out_dir) from exc
    finally:
        if folder.opened:
            with contextlib.suppress(OSError):
                work.rmdir()  # only when empty: a build that made a folder and wrote nothing keeps none
        lock.unlink(missing_ok=True)  # still ours: unlinked before the lock is released
        _held = -1
        os.close(fd)


def _read_owner(lock: Path) -> int | None:
    """The process id in a lock file held by another build (None: not written yet, or not ours)."""
    try:
        fd = os.open(lock, os.O_RDONLY | os.O_NOFOLLOW | os.O_NONBLOCK | os.O_CLOEXEC)
    except OSError:
        return None
    try:
        return int(os.read(fd, 32).decode("ascii").strip())
    except (OSError, ValueError):
        return None
    finally:
        os.close(fd)


def _exchange(a: Path, b: Path) -> bool:
    """Atomically exchange two paths with renameat2; False when the system cannot."""
    from sitegen.clib import c_function  # noqa: PLC0415

    renameat2 = c_function("renameat2")
    if renameat2 is None:
        return False
    at_fdcwd, rename_exchange = -100, 2
    res = renameat2(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange)
    return bool(res == 0)


def swap_in(site: Path, out_dir: Path) -> None:
    """Replace ``out_dir`` by the finished ``site`` folder in one step; ``site`` ends up holding the old one
    (or, on a first build, no longer exists)."""
    if not marker_intact(site):
        write_new(site / MARKER, MARKER_TEXT)
    out = out_dir.resolve()
    if not out.exists():
        site.rename(out)  # a first build: there is no previous site to keep as the spare
        return
    if _exchange(site, out):
        if not (site / MARKER).exists():  # the output folder was empty: nothing to keep as the spare
            with contextlib.suppress(OSError):
                site.rmdir()
        return
    old = out.parent / f".{out.name}.sitegen-old"  # pragma: no cover - systems without renameat2
    import shutil  # noqa: PLC0415

    shutil.rmtree(old, ignore_errors=True)
    out.rename(old)
    site.rename(out)
    old.rename(site)


def site_files(site: Path) -> list[Path]:
    """Every file of a built site in sorted order, without sitegen's own marker; a link that leads outside
    the site (or to a folder) is never followed."""
    from sitegen.confine import outside_reason  # noqa: PLC0415

    found: list[Path] = []
    for dirpath, dirnames, filenames in os.walk(site, followlinks=False):
        dirnames.sort()
        for name in filenames:
            path = Path(dirpath) / name
            if name != MARKER and outside_reason(path, site, "site folder") is None and path.is_file():
                found.append(path)
    return sorted(found)


def folder_name(site: Path) -> str:
    """The folder a packed site unpacks to: its title as a slug (build.json's ``title``), else ``site``.

    Accents are folded (``Qualité`` → ``qualite``); every run of other characters becomes ``-``.
    """
    import unicodedata  # noqa: PLC0415

    from sitegen.records import read_record  # noqa: PLC0415 - records reads the marker through this module

    try:
        title = read_record(site / "build.json")[0].title
    except (OSError, ValueError):
        return "site"
    folded = unicodedata.normalize("NFKD", title).encode("ascii", "ignore").decode("ascii")
    slug = re.sub(r"[^a-z0-9]+", "-", folded.lower()).strip("-")[:80].strip("-")
    return slug or "site"


def pack(site: Path, target: Path) -> int:
    """Zip a built site (links inside are relative, so it works unzipped anywhere); returns its size."""
    if not (site / MARKER).is_file() or not (site / "index.html").is_file():
        raise PackError(f"{site} is not a site built by sitegen", hint="run sitegen build first")
    if target.resolve().is_relative_to(site.resolve()):
        raise PackError("the zip file cannot be written inside the site it packs")
    import zipfile  # noqa: PLC0415 - only pack needs it

    from sitegen.confine import read_inside  # noqa: PLC0415

    top = folder_name(site)
    tmp = target.with_name(f".{target.name}.partial")
    try:
        with zipfile.ZipFile(tmp, "w", zipfile.ZIP_DEFLATED, compresslevel=9) as zf:
            for path in site_files(site):
                rel = path.relative_to(site).as_posix()
                info = zipfile.ZipInfo(f"{top}/{rel}", date_time=(2000, 1, 1, 0, 0, 0))
                info.compress_type = zipfile.ZIP_DEFLATED
                info.external_attr = 0o644 << 16
                data = read_inside(path, site, where="site folder")  # checked again as it is opened
                zf.writestr(info, data, compresslevel=9)  # a ZipInfo does not take the archive's
        tmp.replace(target)
    except OutsideFolderError as exc:
        tmp.unlink(missing_ok=True)
        raise PackError(f"a file of {site} {exc.message}", hint="build the site again") from None
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise PackError(f"cannot write {target}: {exc.strerror or exc}") from exc
    return target.stat().st_size
