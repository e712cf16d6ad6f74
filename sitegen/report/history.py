"""What changed since the previous build, and a bounded history of key estimates.

``history.json`` keeps, for every dataset, its key figures at each build that changed them, over the
last ``MAX_BUILDS`` builds that changed something: ``{"builds": [...], "datasets": {slug: [...]}}``.
Builds are numbered rather than dated so that rebuilding the same input gives the same files; the build
time lives only in ``build.json``. A dataset's list starts with its figures as they stood at the first
kept build (recorded then or earlier); ``{"build": n, "removed": true}`` marks its removal. Storing
changes rather than a copy of every dataset per build keeps the file, and the time to read and write
it on every rebuild, close to the size of one build.
``changes.json`` holds the latest change set, which ``changes.html`` shows with a drift chart per dataset.
"""

from __future__ import annotations

import itertools
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sitegen.jsontext import json_text
from sitegen.model import FitReport
from sitegen.report import charts, pages

MAX_BUILDS = 30
FORMAT = 2
#: The files :func:`write` writes.
HISTORY_FILES = ("history.json", "changes.json", "changes.html")

Record = dict[str, Any]


def snapshot(reports: Sequence[FitReport]) -> dict[str, Record]:
    """The key figures of every dataset in this build."""
    out: dict[str, Record] = {}
    for r in reports:
        c = r.coefficient(r.compare_term) if r.compare_term and r.status != "error" else None
        out[r.dataset] = {
            "title": r.title,
            "status": r.status,
            "input_sha256": r.input_sha256,
            "term": c.term if c else None,
            "estimate": _finite(c.estimate) if c else None,
            "std_error": _finite(c.std_error) if c else None,
            "low": _finite(c.ci_low) if c else None,
            "high": _finite(c.ci_high) if c else None,
            "level": _finite(r.level),
            "requirements": r.requirements_state,
        }
    return out


def _finite(value: float | None) -> float | None:
    """A number JSON can hold (NaN and infinities are recorded as missing)."""
    return value if value is not None and math.isfinite(value) else None


@dataclass(frozen=True, slots=True)
class History:
    """The kept builds (oldest first) and, per dataset, its figures at each kept build that changed them."""

    builds: tuple[int, ...]
    datasets: Mapping[str, tuple[Record, ...]]

    def latest(self) -> dict[str, Record]:
        """Every present dataset's figures as the last kept build left them."""
        return self.at(self.builds[-1]) if self.builds else {}

    def at(self, build: int) -> dict[str, Record]:
        """Every dataset's figures as they stood after a kept build."""
        out: dict[str, Record] = {}
        for slug, entries in self.datasets.items():
            then = [e for e in entries if e["build"] <= build]
            if then and not then[-1].get("removed"):
                out[slug] = _figures(then[-1])
        return out

    def with_build(self, current: Mapping[str, Record], seq: int) -> History:
        """This history with build ``seq`` added (recording what changed) and the oldest builds dropped
        beyond :data:`MAX_BUILDS`."""
        latest = self.latest()
        series = {slug: list(entries) for slug, entries in self.datasets.items()}
        for slug, rec in current.items():
            if latest.get(slug) != rec:
                series.setdefault(slug, []).append({"build": seq, **rec})
        for slug in sorted(set(latest) - set(current)):
            series[slug].append({"build": seq, "removed": True})
        builds = (*self.builds, seq)[-MAX_BUILDS:]
        first = builds[0]
        kept: dict[str, tuple[Record, ...]] = {}
        for slug, entries in sorted(series.items()):
            before = [e for e in entries if e["build"] < first]
            since = [e for e in entries if e["build"] >= first]
            if before and not before[-1].get("removed") and not (since and since[0]["build"] == first):
                since.insert(0, before[-1])  # where it stood at the first kept build, recorded earlier
            if since:
                kept[slug] = tuple(since)
        return History(builds, kept)

    def as_json(self) -> dict[str, Any]:
        return {
            "format": FORMAT,
            "builds": list(self.builds),
            "datasets": {k: list(v) for k, v in self.datasets.items()},
        }


EMPTY = History((), {})


def _figures(entry: Record) -> Record:
    return {k: v for k, v in entry.items() if k != "build"}


_TEXT_KEYS = ("title", "status", "input_sha256")
_NUMBER_KEYS = ("estimate", "std_error", "low", "high", "level")
FIGURE_KEYS = frozenset((*_TEXT_KEYS, "term", *_NUMBER_KEYS))
REQUIREMENT_STATES = ("met", "unmet", "none")
#: How bad a status or requirement state is: a change towards a larger number is a worsening.
_STATUS_RANK = {"ok": 0, "warn": 1, "error": 2}
_REQUIREMENT_RANK = {"none": 0, "met": 0, "unmet": 1}


def _verdict_change(slug: str, old: Mapping[str, Any], new: Mapping[str, Any]) -> dict[str, Any] | None:
    """The change of a dataset's status or requirement state, if either changed."""
    req_old, req_new = old.get("requirements", new.get("requirements", "none")), new.get("requirements", "none")
    if old["status"] == new["status"] and req_old == req_new:
        return None
    worse = _STATUS_RANK[new["status"]] > _STATUS_RANK[old["status"]] or (
        _REQUIREMENT_RANK.get(req_new, 0) > _REQUIREMENT_RANK.get(req_old, 0)
    )
    return {
        "dataset": slug,
        "title": new["title"],
        "status_before": old["status"],
        "status": new["status"],
        "requirements_before": req_old,
        "requirements": req_new,
        "worse": worse,
    }


def _build_number(value: Any) -> int:
    if type(value) is not int or value < 1:
        raise ValueError("a build number is a whole number from 1")
    return value


def _valid_figures(rec: Any) -> Record:
    """One dataset's figures as :func:`snapshot` writes them; raises ``ValueError`` otherwise."""
    if not isinstance(rec, dict) or set(rec) - {"requirements"} != FIGURE_KEYS:
        raise ValueError("not a dataset's figures")
    if rec.get("requirements", "none") not in REQUIREMENT_STATES:  # absent in histories written before it
        raise ValueError("not a dataset's figures")
    if not all(isinstance(rec[k], str) for k in _TEXT_KEYS) or rec["status"] not in ("ok", "warn", "error"):
        raise ValueError("not a dataset's figures")
    if not (rec["term"] is None or isinstance(rec["term"], str)):
        raise ValueError("not a dataset's figures")
    for k in _NUMBER_KEYS:
        v = rec[k]
        if v is not None and (type(v) not in (int, float) or not math.isfinite(v)):
            raise ValueError("not a dataset's figures")
    return rec


def _valid_entry(entry: Any) -> Record:
    """A removal mark, or a dataset's figures at a build; raises ``ValueError`` otherwise."""
    if not isinstance(entry, dict):
        raise ValueError("not a history entry")
    _build_number(entry.get("build"))
    if set(entry) != {"build", "removed"} or entry["removed"] is not True:
        _valid_figures(_figures(entry))
    return entry


def _increasing(numbers: Sequence[int]) -> bool:
    return all(a < b for a, b in itertools.pairwise(numbers))


def read_history(body: Any) -> History | None:
    """The history in a parsed history.json, or None when it is not one (every entry is checked: a file
    edited by hand or damaged is set aside whole rather than half trusted).

    Reads this format and the first one (a full copy of every dataset per build).
    """
    try:
        if not isinstance(body, dict) or not isinstance(body.get("builds"), list):
            return None
        if body.get("format") == FORMAT:
            builds = tuple(_build_number(b) for b in body["builds"])
            datasets = body.get("datasets")
            if not isinstance(datasets, dict) or not builds or not _increasing(builds):
                return None
            out: dict[str, tuple[Record, ...]] = {}
            for slug, entries in datasets.items():
                if not isinstance(entries, list) or not entries:
                    return None
                checked = tuple(_valid_entry(e) for e in entries)
                if not _increasing([e["build"] for e in checked]) or checked[-1]["build"] > builds[-1]:
                    return None
                out[str(slug)] = checked
            return History(builds, out)
        history = EMPTY
        for b in body["builds"]:
            if not isinstance(b, dict) or not isinstance(b.get("datasets"), dict):
                return None
            seq = _build_number(b.get("build"))
            if history.builds and seq <= history.builds[-1]:
                return None
            snap = {str(k): _valid_figures(v) for k, v in b["datasets"].items()}
            history = history.with_build(snap, seq)
        return history
    except (KeyError, TypeError, ValueError):
        return None


def _load(prev_site: Path | None, name: str) -> tuple[bool, Any]:
    """(whether the file is there, its parsed JSON or None when it cannot be read as JSON)."""
    path = prev_site / name if prev_site is not None else None
    if path is None or not path.is_file():
        return False, None
    try:
        return True, json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError):
        return True, None


def _moved(old: Mapping[str, Any], new: Mapping[str, Any]) -> dict[str, Any] | None:
    keys = ("estimate", "std_error", "low", "high")
    if old.get("term") != new.get("term") or any(old.get(k) is None or new.get(k) is None for k in keys):
        return None
    shift = (new["estimate"] - old["estimate"]) / old["std_error"] if old["std_error"] else None
    outside = not (new["low"] <= old["estimate"] <= new["high"])
    return {
        "term": new["term"],
        "old": old["estimate"],
        "new": new["estimate"],
        "shift_se": shift,
        "outside": outside,
    }


def changes(old: Mapping[str, Any] | None, new: Mapping[str, Any], seq: int, before: int | None) -> dict[str, Any]:
    """The change set between two snapshots."""
    old = old or {}
    added = sorted(set(new) - set(old))
    removed = sorted(set(old) - set(new))
    refitted = []
    verdicts = []
    for slug in sorted(set(new) & set(old)):
        verdict = _verdict_change(slug, old[slug], new[slug])
        if verdict is not None:
            verdicts.append(verdict)
        was = dict(old[slug])
        was.setdefault("requirements", new[slug].get("requirements", "none"))  # a history written before it
        if new[slug]["input_sha256"] != old[slug]["input_sha256"] or new[slug] != was:
            refitted.append(
                {
                    "dataset": slug,
                    "title": new[slug]["title"],
                    "status": new[slug]["status"],
                    "moved": _moved(old[slug], new[slug]),
                }
            )
    failed = sorted(s for s, v in new.items() if v["status"] == "error")
    return {
        "build": seq,
        "compared_with": before,
        "new": [{"dataset": s, "title": new[s]["title"], "status": new[s]["status"]} for s in added],
        "removed": [{"dataset": s, "title": old[s]["title"]} for s in removed],
        "refitted": refitted,
        # worsenings first (was met, now unmet; was sound, now failing), then improvements
        "verdicts": sorted(verdicts, key=lambda v: (not v["worse"], v["dataset"])),
        "failed": [{"dataset": s, "title": new[s]["title"]} for s in failed],
    }


def _drift(history: History, r: FitReport) -> dict[str, Any] | None:
    """The drift chart of one dataset, when its compared estimate has moved within the kept builds."""
    if not r.compare_term:
        return None
    recorded = [
        e
        for e in history.datasets.get(r.dataset, ())
        if not e.get("removed") and e.get("estimate") is not None and e.get("term") == r.compare_term
    ]
    series = [
        {"build": f"build {e['build']}", "estimate": e["estimate"], "low": e["low"], "high": e["high"]}
        for e in recorded
    ]
    if len({(p["estimate"], p["low"], p["high"]) for p in series}) < 2:
        return None
    levels = sorted({float(e["level"]) for e in recorded if e.get("level") is not None})
    if len(levels) == 1:
        level_text = f"intervals at {levels[0] * 100:g}%"
    else:
        level_text = "intervals at the level each build used (the level changed between builds)"
    return {
        "report": r,
        "spec": charts.drift_chart(series, r.compare_term),
        "points": len(series),
        "levels": level_text,
    }


def write(work: Path, ctx: pages.SiteContext, reports: Sequence[FitReport], prev_site: Path | None) -> list[str]:
    """Write history.json, changes.json and changes.html; returns warnings.

    The change set is worked out from the history itself (the last recorded build against the one
    before it), so a build that changed nothing shows the latest change again.
    """
    warnings: list[str] = []
    present, body = _load(prev_site, "history.json")
    history = read_history(body) if present else EMPTY
    if history is None:
        warnings.append("the previous history.json was unreadable or not one of sitegen's; the history starts again")
        history = EMPTY
    current = snapshot(reports)
    if not history.builds or history.latest() != current:
        history = history.with_build(current, history.builds[-1] + 1 if history.builds else 1)
    seq = history.builds[-1]
    before = history.builds[-2] if len(history.builds) > 1 else None
    change = changes(history.at(before) if before is not None else None, history.at(seq), seq, before)
    (work / "history.json").write_text(json_text(history.as_json()), "utf-8")
    (work / "changes.json").write_text(json_text(change), "utf-8")
    drift = [d for r in reports if (d := _drift(history, r)) is not None]
    html = pages.render_page(
        ctx, "changes.html", "changes", change=change, drift=drift, kept=len(history.builds), max_builds=MAX_BUILDS
    )
    (work / "changes.html").write_text(html, encoding="utf-8")
    return warnings
