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

import json
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
            "estimate": c.estimate if c else None,
            "std_error": c.std_error if c else None,
            "low": c.ci_low if c else None,
            "high": c.ci_high if c else None,
            "level": r.level,
        }
    return out


@dataclass(frozen=True, slots=True)
class History:
    """The kept builds (oldest first) and, per dataset, its figures at each kept build that changed them."""

    builds: tuple[int, ...]
    datasets: Mapping[str, tuple[Record, ...]]

    def latest(self) -> dict[str, Record]:
        """Every present dataset's figures as the last kept build left them."""
        out: dict[str, Record] = {}
        for slug, entries in self.datasets.items():
            if entries and not entries[-1].get("removed"):
                out[slug] = _figures(entries[-1])
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


def read_history(body: Any) -> History | None:
    """The history in a parsed history.json, or None when it is not one.

    Reads this format and the first one (a full copy of every dataset per build).
    """
    try:
        if not isinstance(body, dict):
            return None
        if body.get("format") == FORMAT:
            builds = tuple(int(b) for b in body["builds"])
            datasets = body["datasets"]
            if not isinstance(datasets, dict):
                return None
            out: dict[str, tuple[Record, ...]] = {}
            for slug, entries in datasets.items():
                if not all(isinstance(e, dict) and isinstance(e.get("build"), int) for e in entries):
                    return None
                out[str(slug)] = tuple(entries)
            return History(builds, out)
        history = EMPTY
        for b in body["builds"]:
            snap = b["datasets"]
            if not isinstance(snap, dict):
                return None
            history = history.with_build(snap, int(b["build"]))
        return history
    except (KeyError, TypeError, ValueError):
        return None


def _load(prev_site: Path | None, name: str) -> Any:
    if prev_site is None:
        return None
    try:
        return json.loads((prev_site / name).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


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
    for slug in sorted(set(new) & set(old)):
        if new[slug]["input_sha256"] != old[slug]["input_sha256"] or new[slug] != old[slug]:
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
    """Write history.json, changes.json and changes.html; returns warnings."""
    warnings: list[str] = []
    body = _load(prev_site, "history.json")
    history = read_history(body) if body is not None else EMPTY
    if history is None:
        warnings.append("the previous history.json was unreadable; the history starts again")
        history = EMPTY
    current = snapshot(reports)
    last = history.latest() if history.builds else None
    change = _load(prev_site, "changes.json")
    if last is None or last != current or not isinstance(change, dict):
        before = history.builds[-1] if history.builds else None
        seq = before + 1 if before is not None else 1
        change = changes(last, current, seq, before)
        if last is None or last != current:
            history = history.with_build(current, seq)
    (work / "history.json").write_text(json_text(history.as_json()), "utf-8")
    (work / "changes.json").write_text(json_text(change), "utf-8")
    drift = [d for r in reports if (d := _drift(history, r)) is not None]
    html = pages.render_page(
        ctx, "changes.html", "changes", change=change, drift=drift, kept=len(history.builds), max_builds=MAX_BUILDS
    )
    (work / "changes.html").write_text(html, encoding="utf-8")
    return warnings
