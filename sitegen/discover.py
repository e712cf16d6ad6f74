"""Find the datasets in a data folder and give each a stable slug.

A dataset is ``NAME.csv`` with an optional sidecar ``NAME.toml`` beside it. Hidden
files and folders (names starting with ``.``) are skipped, and so is whatever
site.toml's ``ignore`` list matches (see :func:`ignored`). Sub-folders become
sections of the site. Symbolic links to folders are not followed (a link loop
must never hang a build); links to files are read like files when they lead to a
file inside the data folder, and refused (an error page for that dataset, see
``confine.py``) when they lead outside it.
"""

from __future__ import annotations

import os
import re
import stat
from collections.abc import Sequence
from dataclasses import dataclass
from fnmatch import fnmatchcase
from pathlib import Path

from sitegen.confine import is_inside

SITE_CONFIG_NAME = "site.toml"


@dataclass(frozen=True, slots=True)
class DatasetSource:
    """Where one dataset lives, relative to the data folder."""

    slug: str
    relpath: str  # POSIX path of the CSV relative to the data folder (odd bytes shown as U+FFFD)
    csv_path: Path
    sidecar_path: Path | None
    section: str  # POSIX path of the containing sub-folder ("" at the root)
    root: Path | None = None  # the data folder: the CSV and sidecar are read only if they lie inside it


_NON_SLUG = re.compile(r"[^a-z0-9]+")


#: Longest slug: a slug names a folder of the site, and file systems allow 255 bytes per name.
MAX_SLUG_CHARS = 160


def base_slug(relpath: str) -> str:
    """The contract's slug: path without ``.csv``, lower-cased, runs of other characters → ``-``.

    A slug longer than :data:`MAX_SLUG_CHARS` (a path of very long folder and file names) is cut, and the
    first 8 hex digits of its full text's SHA-256 are added, so the dataset's folder can be made.
    """
    stem = relpath[: -len(".csv")] if relpath.lower().endswith(".csv") else relpath
    slug = _NON_SLUG.sub("-", stem.lower()).strip("-")
    if len(slug) > MAX_SLUG_CHARS:
        import hashlib  # noqa: PLC0415 - only for such paths

        slug = slug[: MAX_SLUG_CHARS - 9].rstrip("-") + "-" + hashlib.sha256(slug.encode()).hexdigest()[:8]
    return slug or "dataset"


def assign_slugs(relpaths: list[str]) -> dict[str, str]:
    """Map each relative path to a unique slug; collisions get ``-2``, ``-3``… in sorted path order."""
    taken: set[str] = set()
    result: dict[str, str] = {}
    for rel in sorted(relpaths):
        base = base_slug(rel)
        slug, k = base, 1
        while slug in taken:
            k += 1
            slug = f"{base}-{k}"
        taken.add(slug)
        result[rel] = slug
    return result


def _hidden(name: str) -> bool:
    return name.startswith(".")


def ignored(relpath: str, patterns: Sequence[str]) -> bool:
    """Whether site.toml's ``ignore`` list skips this file or folder (``relpath``: POSIX, from the data folder).

    A pattern without ``/`` is matched against the name alone, at any depth (``"drafts"``,
    ``"*.old.csv"``); a pattern with ``/`` against the whole path from the data folder
    (``"field/archive"``, ``"*/scratch_*.csv"``, where ``*`` also crosses ``/``). Matching is
    case-sensitive, with the glob rules of :mod:`fnmatch`. A skipped folder skips all it holds.
    """
    name = relpath.rsplit("/", 1)[-1]
    for pattern in patterns:
        if "/" in pattern:
            if fnmatchcase(relpath, pattern.strip("/")):
                return True
        elif fnmatchcase(name, pattern):
            return True
    return False


def printable_path(rel: str) -> str:
    """A relative path safe to show and to write as UTF-8.

    A file name that is not valid UTF-8 arrives from the operating system with
    its odd bytes as lone surrogates (PEP 383); they would make every page and
    table that names the file unwritable, so they are shown as U+FFFD.
    """
    try:
        rel.encode("utf-8")
    except UnicodeEncodeError:
        return os.fsencode(rel).decode("utf-8", errors="replace")
    return rel


def _readable(name: str, folder: int, path: str, root: str) -> bool:
    """A plain file to read, or a link that leads out of the data folder (listed, so that its dataset gets an
    error page saying it is refused, whatever it leads to: a file, a device such as /dev/zero, nothing).

    Looked at through its folder's descriptor, so that a file whose path is longer than the system allows is
    still found (its dataset then fails alone, with a message saying so).
    """
    try:
        if stat.S_ISREG(os.stat(name, dir_fd=folder).st_mode):
            return True
    except (OSError, ValueError):  # a link to nothing or out of reach, no permission, …
        pass
    try:
        link = stat.S_ISLNK(os.stat(name, dir_fd=folder, follow_symlinks=False).st_mode)
    except (OSError, ValueError):
        return False
    return link and not is_inside(path, root)


def discover(data_dir: Path, ignore: Sequence[str] = ()) -> tuple[DatasetSource, ...]:
    """List every dataset under ``data_dir`` in sorted path order, skipping hidden and ``ignore``d names."""
    found: list[str] = []
    sidecars: set[str] = set()
    root = str(data_dir)
    # os.fwalk rather than os.walk: every folder is opened relative to the one above it, so folders deeper than
    # the longest path the system allows are listed too (and it is faster: no path is looked up twice).
    for dirpath, dirnames, filenames, folder in os.fwalk(root, follow_symlinks=False):
        rel_dir = os.path.relpath(dirpath, root)
        prefix = "" if rel_dir == "." else Path(rel_dir).as_posix() + "/"
        dirnames[:] = sorted(d for d in dirnames if not _hidden(d) and not (ignore and ignored(prefix + d, ignore)))
        names = set(filenames)
        for name in sorted(filenames):
            if _hidden(name) or not name.lower().endswith(".csv"):
                continue
            if ignore and ignored(prefix + name, ignore):
                continue
            if not _readable(name, folder, os.path.join(dirpath, name), root):  # noqa: PTH118 - fifo, link loop, …
                continue
            found.append(prefix + name)
            toml = name[: -len(".csv")] + ".toml"
            if toml in names and _readable(toml, folder, os.path.join(dirpath, toml), root):  # noqa: PTH118
                sidecars.add(prefix + name)
    slugs = assign_slugs(found)
    sources = []
    for rel in sorted(found):
        csv_path = data_dir / rel
        shown = printable_path(rel)
        section = shown.rsplit("/", 1)[0] if "/" in shown else ""
        sources.append(
            DatasetSource(
                slug=slugs[rel],
                relpath=shown,
                csv_path=csv_path,
                sidecar_path=csv_path.with_name(csv_path.name[: -len(".csv")] + ".toml") if rel in sidecars else None,
                section=section,
                root=data_dir,
            )
        )
    return tuple(sources)
