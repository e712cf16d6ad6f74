"""The bounded history of key estimates (history.json) and the change set between builds.

The history records each dataset's figures at the builds that changed them. The checks replay the same
builds through a plain list of full snapshots (one copy of every dataset per build, the obvious way to keep
a history) and require that both tell the same story: the same latest figures, the same values at every
kept build, the same bound on the number of builds.
"""

from __future__ import annotations

import json
import random
from pathlib import Path
from typing import Any

import pytest
from conftest import cli, write_csv
from hypothesis import given, settings
from hypothesis import strategies as st

from sitegen.cli import main
from sitegen.report.history import EMPTY, MAX_BUILDS, History, read_history


def figures(estimate: float, title: str = "t") -> dict[str, Any]:
    return {
        "title": title,
        "status": "ok",
        "input_sha256": f"{estimate:064.3f}"[-64:],
        "term": "x",
        "estimate": estimate,
        "std_error": 0.1,
        "low": estimate - 0.2,
        "high": estimate + 0.2,
        "level": 0.95,
    }


def value_at(history: History, slug: str, build: int) -> dict[str, Any] | None:
    """A dataset's figures as they stood at a kept build, read from the history's change records."""
    out = None
    for e in history.datasets.get(slug, ()):
        if e["build"] <= build:
            out = None if e.get("removed") else {k: v for k, v in e.items() if k != "build"}
    return out


# A sequence of builds: each a snapshot of up to four datasets with a few possible values each.
_SNAPSHOTS = st.lists(
    st.dictionaries(st.sampled_from(["a", "b", "c", "d"]), st.integers(0, 3).map(lambda i: figures(float(i)))),
    min_size=1,
    max_size=MAX_BUILDS + 12,
)


@settings(max_examples=60, deadline=None)
@given(_SNAPSHOTS)
def test_history_of_changes_tells_what_full_snapshots_tell(snapshots: list[dict[str, dict[str, Any]]]) -> None:
    history = EMPTY
    full: list[tuple[int, dict[str, dict[str, Any]]]] = []
    for seq, snap in enumerate(snapshots, start=1):
        if history.builds and history.latest() == snap:
            continue  # a build that changed nothing is not recorded (as write() does)
        history = history.with_build(snap, seq)
        full = [*full, (seq, snap)][-MAX_BUILDS:]
    assert list(history.builds) == [seq for seq, _ in full]
    assert len(history.builds) <= MAX_BUILDS
    assert history.latest() == full[-1][1]
    for seq, snap in full:
        for slug in "abcd":
            assert value_at(history, slug, seq) == snap.get(slug), (slug, seq)
    # written and read back: the same history
    assert read_history(json.loads(json.dumps(history.as_json()))) == history
    # the first format (a full copy per build) reads as the same history
    first_format = {"builds": [{"build": seq, "datasets": snap} for seq, snap in full]}
    assert read_history(first_format) is not None
    assert read_history(first_format).latest() == history.latest()  # type: ignore[union-attr]


def test_a_dataset_removed_long_ago_leaves_the_history() -> None:
    history = EMPTY.with_build({"a": figures(1.0), "b": figures(2.0)}, 1)
    history = history.with_build({"a": figures(1.0)}, 2)
    assert history.datasets["b"][-1] == {"build": 2, "removed": True}
    for seq in range(3, MAX_BUILDS + 3):
        history = history.with_build({"a": figures(float(seq))}, seq)
    assert "b" not in history.datasets
    assert history.builds[0] == 3


def test_unchanged_dataset_keeps_one_entry_however_many_builds() -> None:
    history = EMPTY
    for seq in range(1, 3 * MAX_BUILDS):
        history = history.with_build({"still": figures(5.0), "moving": figures(float(seq))}, seq)
    assert history.datasets["still"] == ({"build": 1, **figures(5.0)},)
    assert len(history.datasets["moving"]) == MAX_BUILDS


def test_not_a_history_is_refused() -> None:
    bodies: list[Any] = [[], {"builds": 3}, {"format": 2, "builds": [1], "datasets": {"a": [{"no": "build"}]}}, "x"]
    for body in bodies:
        assert read_history(body) is None


def test_history_stays_small_as_one_dataset_changes_build_after_build(tmp_path: Path) -> None:
    """Forty rebuilds, each after one of 30 datasets changed: history.json stays near the size of one
    copy of every dataset (a full copy per build would be about MAX_BUILDS times larger), and the change
    report charts the drift of the dataset that moved."""
    data, site = tmp_path / "data", tmp_path / "site"
    rng = random.Random(3)
    for i in range(30):
        rows = "\n".join(f"{x},{2 * x + rng.gauss(0, 0.3):.4f}" for x in range(1, 9))
        write_csv(data / f"set_{i:02d}.csv", f"x,y\n{rows}\n")
    assert main(["build", str(data), "-o", str(site), "-q"]) == 0
    one_build = len((site / "history.json").read_bytes())
    for k in range(40):
        with (data / "set_07.csv").open("a", encoding="utf-8") as f:
            f.write(f"{9 + k},{2 * (9 + k) + rng.gauss(0, 0.3):.4f}\n")
        assert main(["build", str(data), "-o", str(site), "-q"]) == 0
    body = json.loads((site / "history.json").read_text(encoding="utf-8"))
    assert len(body["builds"]) == MAX_BUILDS
    assert len(body["datasets"]["set-07"]) == MAX_BUILDS
    assert len(body["datasets"]["set-08"]) == 1
    assert len((site / "history.json").read_bytes()) < 3 * one_build
    html = (site / "changes.html").read_text(encoding="utf-8")
    assert "drift-set-07" in html
    assert "drift-set-08" not in html


def _small_site(tmp_path: Path) -> tuple[Path, Path]:
    data, site = tmp_path / "data", tmp_path / "site"
    write_csv(data / "a.csv", "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n")
    write_csv(data / "b.csv", "x,y\n1,1.0\n2,1.4\n3,2.1\n4,2.4\n5,3.1\n")
    assert cli("build", data, "-o", site).code == 0
    return data, site


_HOSTILE = [
    "[",  # not JSON at all
    "[" * 100_000 + "]" * 100_000,  # nested too deep for the parser
    '{"format": 2, "builds": [1e999], "datasets": {}}',
    '{"builds": [{"build": 1e999, "datasets": {}}]}',
    '{"format": 2, "builds": [1], "datasets": {"ghost": [{"build": 1}]}}',
    '{"format": 2, "builds": [1], "datasets": {"a": [{"build": 1}]}}',
    '{"format": 2, "builds": [true], "datasets": {}}',
    '{"format": 2, "builds": "12", "datasets": {}}',
    '{"format": 2, "builds": [1], "datasets": {"a": "x"}}',
    '{"format": 2, "builds": [2, 1], "datasets": {}}',
    '{"builds": [{"build": 1, "datasets": {"a": {"title": 3}}}]}',
    '{"builds": 5}',
    '"history"',
]


@pytest.mark.parametrize("text", _HOSTILE, ids=range(len(_HOSTILE)))
def test_a_damaged_history_is_set_aside_with_a_warning(tmp_path: Path, text: str) -> None:
    data, site = _small_site(tmp_path)
    (site / "history.json").write_text(text, encoding="utf-8")
    res = cli("build", data, "-o", site)
    assert res.code == 0, res.output
    assert "history.json" in res.output
    body = json.loads((site / "history.json").read_text(encoding="utf-8"))
    assert body["builds"] == [1]


@pytest.mark.parametrize(
    ("field", "value"),
    [("estimate", float("nan")), ("estimate", "1e999"), ("level", "abc"), ("low", None), ("build", True)],
)
def test_a_history_entry_with_bad_figures_is_set_aside(tmp_path: Path, field: str, value: Any) -> None:
    """Figures that are not finite numbers (or missing ones) never reach a chart or a JSON file."""
    data, site = _small_site(tmp_path)
    body = json.loads((site / "history.json").read_text(encoding="utf-8"))
    entry = body["datasets"]["a"][0]
    if value is None:
        del entry[field]
    else:
        entry[field] = value
    (site / "history.json").write_text(json.dumps(body).replace('"1e999"', "1e999"), encoding="utf-8")
    res = cli("build", data, "-o", site)
    assert res.code == 0, res.output
    assert "history.json" in res.output


def test_a_damaged_change_set_does_not_matter(tmp_path: Path) -> None:
    """changes.json is worked out from the history on every build, never read back."""
    data, site = _small_site(tmp_path)
    before = (site / "changes.json").read_text(encoding="utf-8")
    (site / "changes.json").write_text('{"new": 5, "refitted": "x"}', encoding="utf-8")
    res = cli("build", data, "-o", site)
    assert res.code == 0, res.output
    assert (site / "changes.json").read_text(encoding="utf-8") == before


def test_refit_keeps_the_history_and_compares_with_the_previous_build(tmp_path: Path) -> None:
    data, site = _small_site(tmp_path)
    write_csv(data / "a.csv", "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n6,12.3\n")
    assert cli("build", data, "-o", site, "--refit").code == 0
    change = json.loads((site / "changes.json").read_text(encoding="utf-8"))
    assert (change["build"], change["compared_with"]) == (2, 1)
    assert [c["dataset"] for c in change["refitted"]] == ["a"]
    assert change["new"] == []
    assert json.loads((site / "history.json").read_text(encoding="utf-8"))["builds"] == [1, 2]
    # nothing changed since: the same change set is shown again and no build is added
    assert cli("build", data, "-o", site, "--refit").code == 0
    assert json.loads((site / "changes.json").read_text(encoding="utf-8")) == change
