"""What changed since the previous build, and a bounded history of key estimates.

``history.json`` keeps one snapshot per build that changed something (at most
``MAX_BUILDS``), numbered rather than dated so that rebuilding the same input
gives the same files; the build time lives only in ``build.json``.
``changes.json`` holds the latest change set, which ``changes.html`` shows with
a drift chart per dataset.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from sitegen.jsontext import json_text
from sitegen.model import FitReport
from sitegen.report import charts, pages

MAX_BUILDS = 30
#: The files :func:`write` writes.
HISTORY_FILES = ("history.json", "changes.json", "changes.html")


def snapshot(reports: Sequence[FitReport]) -> dict[str, dict[str, Any]]:
    """The key figures of every dataset in this build."""
    out: dict[str, dict[str, Any]] = {}
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


def write(work: Path, ctx: pages.SiteContext, reports: Sequence[FitReport], prev_site: Path | None) -> list[str]:
    """Write history.json, changes.json and changes.html; returns warnings."""
    warnings: list[str] = []
    hist = _load(prev_site, "history.json")
    builds: list[dict[str, Any]] = hist.get("builds", []) if isinstance(hist, dict) else []
    if hist is not None and not isinstance(hist, dict):
        warnings.append("the previous history.json was unreadable; the history starts again")
    current = snapshot(reports)
    last = builds[-1] if builds else None
    change = _load(prev_site, "changes.json")
    if last is None or last.get("datasets") != current or not isinstance(change, dict):
        seq = (int(last["build"]) + 1) if last else 1
        change = changes(last["datasets"] if last else None, current, seq, int(last["build"]) if last else None)
        if last is None or last.get("datasets") != current:
            builds = [*builds, {"build": seq, "datasets": current}][-MAX_BUILDS:]
    (work / "history.json").write_text(json_text({"builds": builds}), "utf-8")
    (work / "changes.json").write_text(json_text(change), "utf-8")
    drift = []
    for r in reports:
        series = [
            {"build": f"build {b['build']}", "estimate": d["estimate"], "low": d["low"], "high": d["high"]}
            for b in builds
            if (d := b["datasets"].get(r.dataset)) and d.get("estimate") is not None and d.get("term") == r.compare_term
        ]
        moved = len({(p["estimate"], p["low"], p["high"]) for p in series}) > 1
        if len(series) >= 2 and moved and r.compare_term:
            levels = sorted(
                {
                    float(d["level"])
                    for b in builds
                    if (d := b["datasets"].get(r.dataset)) and d.get("level") is not None
                }
            )
            if len(levels) == 1:
                level_text = f"intervals at {levels[0] * 100:g}%"
            else:
                level_text = "intervals at the level each build used (the level changed between builds)"
            drift.append(
                {
                    "report": r,
                    "spec": charts.drift_chart(series, r.compare_term),
                    "points": len(series),
                    "levels": level_text,
                }
            )
    html = pages.render_page(
        ctx, "changes.html", "changes", change=change, drift=drift, kept=len(builds), max_builds=MAX_BUILDS
    )
    (work / "changes.html").write_text(html, encoding="utf-8")
    return warnings
