"""build.json's records: file stats, input fingerprints, the previous build as read, the nothing-changed test.

A build records, per dataset, the size, times, inode and hash of its CSV and sidecar and of the fit.json it
wrote, and a manifest of every file of the site. The next build reads them here (:func:`read_previous`),
measures the inputs again without reading files whose stat is unchanged (:func:`measure`), and when nothing at
all changed (:func:`nothing_changed`) only rewrites build.json. A missing or damaged record only means more work.
"""

from __future__ import annotations

import json
import os
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sitegen.confine import outside_reason, read_inside
from sitegen.digest import file_sha256, sha256_hex
from sitegen.discover import DatasetSource
from sitegen.errors import OutsideFolderError
from sitegen.publish import marker_intact

#: A file whose modification time is this close to the moment its hash was recorded is hashed
#: again next time, as its content may still change within the file system's clock resolution
#: (common practice: git's rule for "racily clean" files).
_RACY_NS = 2_000_000_000


def file_stat(path: Path) -> list[int] | None:
    """Size, modification time, inode and change time of one of our own output files (as the site's file
    manifest records them: a file rewritten in place, its modification time set back, still differs)."""
    try:
        st = path.stat()
    except OSError:
        return None
    return [st.st_size, st.st_mtime_ns, st.st_ino, st.st_ctime_ns]


def input_stat(path: Path) -> list[int] | None:
    """Size, modification time, inode, change time and device of an input file.

    The change time cannot be set back (a copy that restores the modification time, such as
    ``cp -p`` or ``rsync -t``, still moves it), so an edit is always noticed (common practice, as git).
    """
    try:
        st = path.stat()
    except OSError:
        return None
    return [st.st_size, st.st_mtime_ns, st.st_ino, st.st_ctime_ns, st.st_dev]


def _refused(path: Path | None, root: Path | None) -> str | None:
    """A stand-in hash for an input that leads outside the data folder (it is never read, not even to hash it);
    None for a file that may be read."""
    if path is None or root is None:
        return None
    reason = outside_reason(path, root)
    return None if reason is None else sha256_hex(f"refused: {reason}".encode())


def _known_sha(stat: list[int] | None, record: Any, name: str) -> str | None:
    """The recorded sha256 of file ``name`` when its size, time and inode are as recorded, else None."""
    if stat is None or not isinstance(record, dict) or record.get(name) != stat:
        return None
    sha = record.get(f"{name}_sha256")
    return sha if isinstance(sha, str) and len(sha) == 64 else None


@dataclass(frozen=True, slots=True)
class Measured:
    """What a build learns about one dataset's input files before it decides anything."""

    input_sha256: str  # of the CSV ("" when it cannot be read)
    fingerprint: str  # of everything that shapes the dataset's numbers ("" when the CSV cannot be read)
    record: dict[str, Any]  # sizes, times and hashes, kept in build.json ("stat") for the next build
    csv_stat: list[int] | None  # the CSV's stat now, to notice a change while the build runs
    sidecar_stat: list[int] | None  # the sidecar's, likewise


def measure(src: DatasetSource, shared: str, record: Any = None) -> Measured:
    """Hash (or recognise) a dataset's CSV and sidecar and fingerprint everything that shapes its numbers.

    Files whose size, modification time and inode match the previous build's record are not
    read again; their recorded hashes stand (the record is kept in build.json).
    """
    now = time.time_ns()
    csv_refused = _refused(src.csv_path, src.root)
    csv_stat = input_stat(src.csv_path) if csv_refused is None else None
    csv_sha = _known_sha(csv_stat, record, "csv") if csv_refused is None else csv_refused
    if csv_sha is None:
        try:
            csv_sha = file_sha256(src.csv_path)
        except OSError:
            return Measured("", "", {}, None, None)
    side_refused = _refused(src.sidecar_path, src.root)
    side_stat = input_stat(src.sidecar_path) if src.sidecar_path is not None and side_refused is None else None
    side_sha = _known_sha(side_stat, record, "sidecar") if src.sidecar_path else sha256_hex(b"")
    if side_refused is not None:
        side_sha = side_refused
    elif side_sha is None:
        sidecar = b""
        if src.sidecar_path is not None:
            try:
                sidecar = read_inside(src.sidecar_path, src.root)
            except (OSError, OutsideFolderError):
                sidecar = b"<unreadable>"
        side_sha = sha256_hex(sidecar)
    payload = shared + "\n" + json.dumps([csv_sha, side_sha, src.relpath, src.slug, src.section])

    def settled(stat: list[int] | None) -> list[int] | None:
        return stat if stat is not None and max(stat[1], stat[3]) < now - _RACY_NS else None

    stats = {"csv": settled(csv_stat), "csv_sha256": csv_sha, "sidecar": settled(side_stat), "sidecar_sha256": side_sha}
    return Measured(csv_sha, sha256_hex(payload.encode()), stats, csv_stat, side_stat)


@dataclass(frozen=True, slots=True)
class PreviousBuild:
    """What the previous build left that can be reused."""

    site: Path | None
    entries: dict[str, dict[str, Any]]
    site_key: str
    body: dict[str, Any]
    text: str = ""  # build.json as read


def read_previous(out_dir: Path) -> PreviousBuild:
    path = out_dir / "build.json"
    try:
        text = path.read_text(encoding="utf-8")
        body = json.loads(text)
        entries = {str(e["dataset"]): e for e in body["datasets"] if isinstance(e, dict)}
        return PreviousBuild(out_dir, entries, str(body.get("site_key", "")), body, text)
    except (OSError, ValueError, KeyError, TypeError):
        return PreviousBuild(out_dir if out_dir.is_dir() else None, {}, "", {})


def fit_json_intact(path: Path, entry: dict[str, Any]) -> bool:
    """The stored fit.json is the one the previous build recorded: same size, time and inode, or same sha256.

    Our own output, recorded right after it was written; a file rewritten since has a new time.
    """
    sha = entry.get("fit_sha256")
    if not sha:
        return False
    stat = file_stat(path)
    if stat is None:
        return False
    if stat == entry.get("fit_stat"):
        return True
    try:
        return bool(file_sha256(path) == sha)
    except OSError:
        return False


def manifest(site: Path) -> dict[str, list[int]]:
    """Size, modification time, inode and change time of every file of a built site, except build.json and
    sitegen's own top-level dot files (a file changed since, even to the same size and time, no longer matches)."""
    out: dict[str, list[int]] = {}

    def walk(folder: str, prefix: str) -> None:
        with os.scandir(folder) as entries:
            for entry in entries:
                rel = prefix + entry.name
                if entry.is_dir(follow_symlinks=False):
                    walk(entry.path, rel + "/")
                elif entry.is_file(follow_symlinks=False) and rel != "build.json" and not rel.startswith("."):
                    st = entry.stat(follow_symlinks=False)
                    out[rel] = [st.st_size, st.st_mtime_ns, st.st_ino, st.st_ctime_ns]

    walk(str(site), "")
    return dict(sorted(out.items()))


def nothing_changed(
    prev: PreviousBuild, sources: Sequence[DatasetSource], measured: Mapping[str, Measured], site_key: str
) -> bool:
    """The published site is exactly what this build would write: same inputs, settings and files."""
    if prev.site is None or not prev.entries or prev.site_key != site_key:
        return False
    if set(prev.entries) != {s.slug for s in sources}:
        return False
    for s in sources:
        e = prev.entries[s.slug]
        fingerprint = measured[s.slug].fingerprint
        if e.get("fingerprint") != fingerprint or not fingerprint:
            return False
        if e.get("status") == "error" and e.get("failure_kept") is not True:
            return False  # a failure is reused only when it came from the input itself
    if not marker_intact(prev.site):
        return False  # a build rewrites it
    # every file the previous build wrote is still there as it was written, and nothing else is
    files = manifest(prev.site)
    if prev.body.get("files") != files:
        return False
    for s in sources:  # each fit.json is the one whose sha256 was recorded (read from the walk: no more stats)
        e = prev.entries[s.slug]
        if not e.get("fit_sha256"):
            return False
        if e.get("fit_stat") != files.get(f"datasets/{s.slug}/fit.json") and not fit_json_intact(
            prev.site / "datasets" / s.slug / "fit.json", e
        ):
            return False  # missing, changed or corrupt since the previous build wrote it
    return True


def retimed(prev: PreviousBuild, body: dict[str, Any]) -> str | None:
    """The previous build.json's text with only its build time changed, when that is all that differs from
    ``body`` (a rebuild with nothing to do after one that reused everything); else None.

    Top-level keys are the only lines that begin with a line break and one space (see :mod:`sitegen.jsontext`).
    """
    if body["datasets"] != prev.body.get("datasets") or "built_at" not in prev.body:
        return None
    old = '\n "built_at": ' + json.dumps(prev.body["built_at"], ensure_ascii=False) + ",\n"
    if prev.text.count(old) != 1:
        return None
    return prev.text.replace(old, '\n "built_at": ' + json.dumps(body["built_at"], ensure_ascii=False) + ",\n")


def files_by_folder(body: dict[str, Any]) -> dict[str, dict[str, Any]]:
    """A build.json's file manifest, grouped by dataset folder: slug -> {name: [size, mtime, inode, ctime]}."""
    out: dict[str, dict[str, Any]] = {}
    files = body.get("files")
    if isinstance(files, dict):
        for key, stat in files.items():
            if key.startswith("datasets/"):
                slug, _, name = key[len("datasets/") :].partition("/")
                out.setdefault(slug, {})[name] = stat
    return out
