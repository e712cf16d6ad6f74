"""build.json's records: file stats, input fingerprints, the previous build as read, the nothing-changed test.

A build records, per dataset, the size, times, inode and hash of its CSV and sidecar and of the fit.json it
wrote (:class:`DatasetRecord`), and a manifest of every file of the site (:class:`BuildRecord`). The next build
reads them here (:func:`read_previous`), measures the inputs again without reading files whose stat is
unchanged (:func:`measure`), and when nothing at all changed (:func:`nothing_changed`) only rewrites
build.json. The JSON form is read strictly: a record that is missing, of another shape or garbled reads as no
record at all, which only means more work (a full build), never an error.
"""

from __future__ import annotations

import json
import os
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, NamedTuple

from sitegen.confine import outside_reason, read_inside
from sitegen.digest import file_sha256, sha256_hex
from sitegen.discover import DatasetSource
from sitegen.errors import OutsideFolderError
from sitegen.publish import marker_intact

#: A file whose modification time is this close to the moment its hash was recorded is hashed
#: again next time, as its content may still change within the file system's clock resolution
#: (common practice: git's rule for "racily clean" files).
_RACY_NS = 2_000_000_000


class FileStat(NamedTuple):
    """Size, modification time, inode and change time of one of sitegen's own output files (as the site's file
    manifest records them: a file rewritten in place, its modification time set back, still differs)."""

    size: int
    mtime_ns: int
    inode: int
    ctime_ns: int


class InputStat(NamedTuple):
    """Size, modification time, inode, change time and device of an input file.

    The change time cannot be set back (a copy that restores the modification time, such as
    ``cp -p`` or ``rsync -t``, still moves it), so an edit is always noticed (common practice, as git).
    """

    size: int
    mtime_ns: int
    inode: int
    ctime_ns: int
    device: int


def _texts(body: dict[str, Any], *keys: str) -> dict[str, str]:
    """The values of ``keys`` in ``body``, each a string; raises ValueError for a key missing or not text."""
    found = {k: body.get(k) for k in keys}
    texts = {k: v for k, v in found.items() if isinstance(v, str)}
    if len(texts) != len(keys):
        raise ValueError(f"a build record lacks {', '.join(sorted(set(keys) - set(texts)))}")
    return texts


# A stat is read back as the list build.json holds, its length checked; its items are not (a site has thousands
# of them, and a stat whose items are not the numbers measured simply never equals a measured one).


def _file_stat_json(value: Any) -> FileStat | None:
    return FileStat._make(value) if type(value) is list and len(value) == 4 else None


def _input_stat_json(value: Any) -> InputStat | None:
    return InputStat._make(value) if type(value) is list and len(value) == 5 else None


def file_stat(path: Path) -> FileStat | None:
    """The stat of one of our own output files, None when it is not there."""
    try:
        st = path.stat()
    except OSError:
        return None
    return FileStat(st.st_size, st.st_mtime_ns, st.st_ino, st.st_ctime_ns)


def input_stat(path: Path, *, refused: bool = False) -> InputStat | None:
    """The stat of an input file, None when it is not there. For an input refused as a link out of the data
    folder (``refused``), the stat of the link itself: what it points to is never looked at, while a link
    made anew or pointed elsewhere still has a stat of its own that differs."""
    try:
        st = os.lstat(path) if refused else path.stat()
    except OSError:
        return None
    return InputStat(st.st_size, st.st_mtime_ns, st.st_ino, st.st_ctime_ns, st.st_dev)


@dataclass(frozen=True, slots=True)
class InputRecord:
    """What build.json keeps of a dataset's input files (its ``stat``): their stats when they had settled
    (else None) and their hashes, so that a file whose stat is unchanged is not read again."""

    csv: InputStat | None = None
    csv_sha256: str = ""
    sidecar: InputStat | None = None
    sidecar_sha256: str = ""

    def known_csv_sha256(self, now: InputStat | None) -> str | None:
        """The recorded hash of the CSV while its stat is as recorded, else None."""
        return self.csv_sha256 if now is not None and now == self.csv and len(self.csv_sha256) == 64 else None

    def known_sidecar_sha256(self, now: InputStat | None) -> str | None:
        """The recorded hash of the sidecar while its stat is as recorded, else None."""
        ok = now is not None and now == self.sidecar and len(self.sidecar_sha256) == 64
        return self.sidecar_sha256 if ok else None

    def as_json(self) -> dict[str, Any]:
        return {
            "csv": None if self.csv is None else list(self.csv),
            "csv_sha256": self.csv_sha256,
            "sidecar": None if self.sidecar is None else list(self.sidecar),
            "sidecar_sha256": self.sidecar_sha256,
        }

    @staticmethod
    def from_json(value: Any) -> InputRecord:
        """The record as build.json holds it; anything else reads as no record (every file is hashed)."""
        if not isinstance(value, dict):
            return InputRecord()
        csv_sha, side_sha = value.get("csv_sha256"), value.get("sidecar_sha256")
        return InputRecord(
            _input_stat_json(value.get("csv")),
            csv_sha if isinstance(csv_sha, str) else "",
            _input_stat_json(value.get("sidecar")),
            side_sha if isinstance(side_sha, str) else "",
        )


NO_INPUTS = InputRecord()


def _refused(path: Path | None, root: Path | None) -> str | None:
    """A stand-in hash for an input that leads outside the data folder (it is never read, not even to hash it);
    None for a file that may be read."""
    if path is None or root is None:
        return None
    reason = outside_reason(path, root)
    return None if reason is None else sha256_hex(f"refused: {reason}".encode())


@dataclass(frozen=True, slots=True)
class Measured:
    """What a build learns about one dataset's input files before it decides anything."""

    input_sha256: str  # of the CSV ("" when it cannot be read)
    fingerprint: str  # of everything that shapes the dataset's numbers ("" when the CSV cannot be read)
    inputs: InputRecord  # sizes, times and hashes, kept in build.json ("stat") for the next build
    csv_stat: InputStat | None  # the CSV's stat now, to notice a change while the build runs
    sidecar_stat: InputStat | None  # the sidecar's, likewise
    csv_refused: bool = False  # the CSV leads outside the data folder: its stats are the link's own
    sidecar_refused: bool = False  # the sidecar, likewise

    def unchanged_since(self, src: DatasetSource) -> bool:
        """The dataset's CSV and sidecar have the stats they had when this measurement was taken (a file
        away, garbled or replaced while the build ran is tried again next time)."""
        if self.csv_stat is None or input_stat(src.csv_path, refused=self.csv_refused) != self.csv_stat:
            return False
        if src.sidecar_path is None:
            return self.sidecar_stat is None
        return input_stat(src.sidecar_path, refused=self.sidecar_refused) == self.sidecar_stat


def measure(src: DatasetSource, shared: str, record: InputRecord = NO_INPUTS) -> Measured:
    """Hash (or recognise) a dataset's CSV and sidecar and fingerprint everything that shapes its numbers.

    Files whose size, modification time and inode match the previous build's record are not read again;
    their recorded hashes stand (the record is kept in build.json). An input that leads outside the data
    folder is not read at all: a stand-in hash says why, and the link's own stat is recorded, so that a
    refused dataset whose link stays as it was is not tried again by every build.
    """
    now = time.time_ns()
    csv_refused = _refused(src.csv_path, src.root)
    csv_stat = input_stat(src.csv_path, refused=csv_refused is not None)
    csv_sha = record.known_csv_sha256(csv_stat) if csv_refused is None else csv_refused
    if csv_sha is None:
        try:
            csv_sha = file_sha256(src.csv_path)
        except OSError:
            return Measured("", "", NO_INPUTS, None, None)
    side_refused = _refused(src.sidecar_path, src.root)
    side_stat = None
    side_sha = sha256_hex(b"")  # no sidecar
    if src.sidecar_path is not None:
        side_stat = input_stat(src.sidecar_path, refused=side_refused is not None)
        known = side_refused or record.known_sidecar_sha256(side_stat)
        try:
            side_sha = known or sha256_hex(read_inside(src.sidecar_path, src.root))
        except (OSError, OutsideFolderError):
            side_sha = sha256_hex(b"<unreadable>")
    payload = shared + "\n" + json.dumps([csv_sha, side_sha, src.relpath, src.slug, src.section])

    def settled(stat: InputStat | None) -> InputStat | None:
        return stat if stat is not None and max(stat.mtime_ns, stat.ctime_ns) < now - _RACY_NS else None

    inputs = InputRecord(settled(csv_stat), csv_sha, settled(side_stat), side_sha)
    return Measured(
        csv_sha,
        sha256_hex(payload.encode()),
        inputs,
        csv_stat,
        side_stat,
        csv_refused=csv_refused is not None,
        sidecar_refused=side_refused is not None,
    )


@dataclass(frozen=True, slots=True)
class DatasetRecord:
    """One dataset as build.json records it (an entry of its ``datasets`` list)."""

    dataset: str  # the slug
    source: str  # the CSV's path in the data folder
    input_sha256: str  # of the CSV (a stand-in for one refused unread)
    fingerprint: str  # of everything that shapes its numbers (records.measure)
    page_key: str  # of everything that shapes its page
    reused: bool  # its result came from the previous build, not a new fit
    status: str  # "ok", "warn" or "error"
    message: str  # the summary's message
    index: Mapping[str, Any]  # its index values (report.files.index_entry): a rebuild needs no fit.json
    inputs: InputRecord  # its input files' stats and hashes (build.json's "stat")
    failure_kept: bool  # failed because of its input as fingerprinted: the failure may be reused
    fit_sha256: str = ""  # of its fit.json as written
    fit_stat: FileStat | None = None  # of its fit.json as written

    @property
    def requirements(self) -> str:
        """``met``, ``unmet`` or ``none`` (nothing declared), from the index values."""
        return str(self.index.get("requirements", "none"))

    @property
    def sidecar_warnings(self) -> tuple[str, ...]:
        """The warnings about its sidecar's keys, from the index values."""
        found = self.index.get("sidecar_warnings", ())
        return tuple(str(w) for w in found) if isinstance(found, list | tuple) else ()

    @property
    def failure_reusable(self) -> bool:
        """Not failed, or failed in a way that the same input repeats (``failure_kept``)."""
        return self.status != "error" or self.failure_kept

    def as_json(self) -> dict[str, Any]:
        return {
            "dataset": self.dataset,
            "source": self.source,
            "input_sha256": self.input_sha256,
            "fingerprint": self.fingerprint,
            "page_key": self.page_key,
            "reused": self.reused,
            "status": self.status,
            "message": self.message,
            "index": dict(self.index),
            "stat": self.inputs.as_json(),
            "failure_kept": self.failure_kept,
            "fit_sha256": self.fit_sha256,
            "fit_stat": None if self.fit_stat is None else list(self.fit_stat),
        }

    @staticmethod
    def from_json(value: Any) -> DatasetRecord:
        """An entry as build.json holds it; raises ValueError for anything else."""
        if not isinstance(value, dict):
            raise ValueError("a dataset record is not an object")
        text = _texts(value, "dataset", "source", "input_sha256", "fingerprint", "page_key", "status")
        if not text["dataset"]:
            raise ValueError("a dataset record lacks its name")
        message, index, fit_sha = value.get("message", ""), value.get("index"), value.get("fit_sha256") or ""
        if not isinstance(index, dict) or not isinstance(fit_sha, str):
            raise ValueError("a dataset record lacks its index values")
        return DatasetRecord(
            dataset=text["dataset"],
            source=text["source"],
            input_sha256=text["input_sha256"],
            fingerprint=text["fingerprint"],
            page_key=text["page_key"],
            reused=value.get("reused") is True,
            status=text["status"],
            message=message if isinstance(message, str) else str(message),
            index=index,
            inputs=InputRecord.from_json(value.get("stat")),
            failure_kept=value.get("failure_kept") is True,
            fit_sha256=fit_sha,
            fit_stat=_file_stat_json(value.get("fit_stat")),
        )


@dataclass(frozen=True, slots=True)
class BuildRecord:
    """build.json: the build's provenance, its datasets and the manifest of every file of the site."""

    sitegen_version: str
    libraries: Mapping[str, str]
    python: str
    built_at: str  # the time of the build, UTC (the only time in the site besides assets/built.js)
    site_key: str  # of everything besides a dataset's own inputs that shapes its page
    title: str
    mail_budget_megabytes: float
    datasets: tuple[DatasetRecord, ...]
    files: Mapping[str, FileStat]  # every file of the site but build.json, by path (see :func:`manifest`)

    def as_json(self) -> dict[str, Any]:
        return {
            "generator": "sitegen",
            "sitegen_version": self.sitegen_version,
            "libraries": dict(self.libraries),
            "python": self.python,
            "built_at": self.built_at,
            "site_key": self.site_key,
            "title": self.title,
            "mail_budget_megabytes": self.mail_budget_megabytes,
            "datasets": [d.as_json() for d in self.datasets],
            "files": {name: list(stat) for name, stat in self.files.items()},
        }

    @staticmethod
    def from_json(body: Any) -> BuildRecord:
        """build.json's content; raises ValueError when it is not one of this version's."""
        if not isinstance(body, dict) or body.get("generator") != "sitegen":
            raise ValueError("not a build record of sitegen's")
        files, datasets, libraries = body.get("files"), body.get("datasets"), body.get("libraries")
        if not isinstance(files, dict) or not isinstance(datasets, list) or not isinstance(libraries, dict):
            raise ValueError("a build record lacks its datasets or files")
        make = FileStat._make
        manifest = {name: make(v) for name, v in files.items() if type(v) is list and len(v) == 4}
        if len(manifest) != len(files):
            raise ValueError("a build record's file manifest is garbled")
        text = _texts(body, "sitegen_version", "python", "built_at", "site_key", "title")
        budget = body.get("mail_budget_megabytes")
        if not isinstance(budget, int | float) or isinstance(budget, bool):
            raise ValueError("a build record lacks its mail budget")
        return BuildRecord(
            sitegen_version=text["sitegen_version"],
            libraries={str(k): str(v) for k, v in libraries.items()},
            python=text["python"],
            built_at=text["built_at"],
            site_key=text["site_key"],
            title=text["title"],
            mail_budget_megabytes=float(budget),
            datasets=tuple(DatasetRecord.from_json(e) for e in datasets),
            files=manifest,
        )

    def files_by_folder(self) -> dict[str, dict[str, FileStat]]:
        """The file manifest grouped by dataset folder: slug -> {name: stat}."""
        out: dict[str, dict[str, FileStat]] = {}
        for key, stat in self.files.items():
            if key.startswith("datasets/"):
                slug, _, name = key[len("datasets/") :].partition("/")
                out.setdefault(slug, {})[name] = stat
        return out


@dataclass(frozen=True, slots=True)
class PreviousBuild:
    """What the previous build left that can be reused: its site folder (None when there is none) and its
    record (None when build.json is missing, garbled or of another version: then nothing is reused)."""

    site: Path | None
    record: BuildRecord | None = None
    text: str = ""  # build.json as read
    entries: Mapping[str, DatasetRecord] = field(default_factory=dict)  # the record's datasets by slug

    @property
    def site_key(self) -> str:
        return self.record.site_key if self.record is not None else ""


NO_PREVIOUS = PreviousBuild(None)


def read_record(path: Path) -> tuple[BuildRecord, str]:
    """A site's build.json and its text; raises OSError or ValueError when it cannot be read as one."""
    text = path.read_text(encoding="utf-8")
    return BuildRecord.from_json(json.loads(text)), text


def read_previous(out_dir: Path) -> PreviousBuild:
    """The previous build in ``out_dir``: its record when build.json can be read as one, else none."""
    try:
        record, text = read_record(out_dir / "build.json")
    except (OSError, ValueError):
        return PreviousBuild(out_dir if out_dir.is_dir() else None)
    return PreviousBuild(out_dir, record, text, {e.dataset: e for e in record.datasets})


def fit_json_intact(path: Path, entry: DatasetRecord) -> bool:
    """The stored fit.json is the one the previous build recorded: same size, time and inode, or same sha256.

    Our own output, recorded right after it was written; a file rewritten since has a new time.
    """
    if not entry.fit_sha256:
        return False
    stat = file_stat(path)
    if stat is None:
        return False
    if stat == entry.fit_stat:
        return True
    try:
        return file_sha256(path) == entry.fit_sha256
    except OSError:
        return False


def manifest(site: Path) -> dict[str, FileStat]:
    """The stat of every file of a built site, except build.json and sitegen's own top-level dot files (a
    file changed since, even to the same size and time, no longer matches)."""
    out: dict[str, FileStat] = {}

    def walk(folder: str, prefix: str) -> None:
        with os.scandir(folder) as entries:
            for entry in entries:
                rel = prefix + entry.name
                if entry.is_dir(follow_symlinks=False):
                    walk(entry.path, rel + "/")
                elif entry.is_file(follow_symlinks=False) and rel != "build.json" and not rel.startswith("."):
                    st = entry.stat(follow_symlinks=False)
                    out[rel] = FileStat(st.st_size, st.st_mtime_ns, st.st_ino, st.st_ctime_ns)

    walk(str(site), "")
    return dict(sorted(out.items()))


def nothing_changed(
    prev: PreviousBuild, sources: Sequence[DatasetSource], measured: Mapping[str, Measured], site_key: str
) -> bool:
    """The published site is exactly what this build would write: same inputs, settings and files."""
    record = prev.record
    if prev.site is None or record is None or not prev.entries or record.site_key != site_key:
        return False
    if set(prev.entries) != {s.slug for s in sources}:
        return False
    for s in sources:
        e = prev.entries[s.slug]
        fingerprint = measured[s.slug].fingerprint
        if e.fingerprint != fingerprint or not fingerprint or not e.failure_reusable:
            return False  # a failure is reused only when it came from the input itself
    if not marker_intact(prev.site):
        return False  # a build rewrites it
    # every file the previous build wrote is still there as it was written, and nothing else is
    files = manifest(prev.site)
    if record.files != files:
        return False
    for s in sources:  # each fit.json is the one whose sha256 was recorded (read from the walk: no more stats)
        e = prev.entries[s.slug]
        if not e.fit_sha256:
            return False
        if e.fit_stat != files.get(f"datasets/{s.slug}/fit.json") and not fit_json_intact(
            prev.site / "datasets" / s.slug / "fit.json", e
        ):
            return False  # missing, changed or corrupt since the previous build wrote it
    return True


def retimed(prev: PreviousBuild, new: BuildRecord) -> str | None:
    """The previous build.json's text with only its build time changed, when that is all that differs from
    ``new`` (a rebuild with nothing to do after one that reused everything); else None.

    Top-level keys are the only lines that begin with a line break and one space (see :mod:`sitegen.jsontext`).
    """
    if prev.record is None or new.datasets != prev.record.datasets:
        return None
    old = '\n "built_at": ' + json.dumps(prev.record.built_at, ensure_ascii=False) + ",\n"
    if prev.text.count(old) != 1:
        return None
    return prev.text.replace(old, '\n "built_at": ' + json.dumps(new.built_at, ensure_ascii=False) + ",\n")
