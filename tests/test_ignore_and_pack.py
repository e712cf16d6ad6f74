"""site.toml's ``ignore`` list (validation and matching) and the folder a packed site unpacks to.

The glob rules are Python's :mod:`fnmatch` (case-sensitive here); the expected matches below are
worked out by hand from those rules.
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path

import pytest
from conftest import LINE_CSV, cli, write_csv

from sitegen.discover import discover, ignored
from sitegen.errors import SiteConfigError
from sitegen.publish import folder_name
from sitegen.spec import read_site_config


@pytest.mark.parametrize(
    ("relpath", "patterns", "expected"),
    [
        ("drafts", ["drafts"], True),  # a folder by name at the root
        ("field/drafts", ["drafts"], True),  # … and at any depth
        ("field/drafts.csv", ["drafts"], False),  # the whole name, not a part of it
        ("field/a.old.csv", ["*.old.csv"], True),
        ("field/a.csv", ["*.old.csv"], False),
        ("field/archive", ["field/archive"], True),  # a pattern with '/' is a path from the data folder
        ("other/field/archive", ["field/archive"], False),
        ("x/y/run_1.csv", ["*/run_?.csv"], True),  # fnmatch's '*' crosses '/'
        ("Drafts", ["drafts"], False),  # case-sensitive
        ("b.csv", ["a.csv", "[b-c].csv"], True),
        ("_notes.csv", [], False),  # a leading underscore means nothing
    ],
)
def test_ignore_patterns_match_names_and_paths(relpath: str, patterns: list[str], expected: bool) -> None:
    assert ignored(relpath, patterns) is expected


def test_discover_skips_hidden_and_ignored_only(tmp_path: Path) -> None:
    for rel in ("keep.csv", "_also_kept.csv", ".hidden.csv", "drafts/x.csv", "sub/drafts/y.csv", "sub/z.old.csv"):
        write_csv(tmp_path / rel, LINE_CSV)
    found = [s.relpath for s in discover(tmp_path, ("drafts", "*.old.csv"))]
    assert found == ["_also_kept.csv", "keep.csv"]
    assert [s.relpath for s in discover(tmp_path)] == [
        "_also_kept.csv",
        "drafts/x.csv",
        "keep.csv",
        "sub/drafts/y.csv",
        "sub/z.old.csv",
    ]


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ('ignore = "drafts"', "must be a list of glob patterns"),
        ("ignore = [1]", "must hold non-empty strings"),
        ('ignore = [" "]', "must hold non-empty strings"),
        ('ignore = ["/etc/*"]', "inside the data folder"),
        ('ignore = ["../x"]', "inside the data folder"),
        ('ignore = ["a\\\\b"]', "inside the data folder"),
        ("ignore = [" + ", ".join(['"x"'] * 201) + "]", "at most 200"),
    ],
)
def test_bad_ignore_lists_are_refused_with_a_message(tmp_path: Path, text: str, message: str) -> None:
    (tmp_path / "site.toml").write_text(text + "\n", encoding="utf-8")
    with pytest.raises(SiteConfigError, match=message):
        read_site_config(tmp_path / "site.toml")


def test_a_bad_ignore_list_stops_the_build_before_anything_is_written(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", LINE_CSV)
    (data / "site.toml").write_text('ignore = ["../outside"]\n', encoding="utf-8")
    res = cli("build", data, "-o", tmp_path / "out")
    assert res.code == 2
    assert "ignore pattern '../outside'" in res.output
    assert not (tmp_path / "out").exists()


def test_ignored_files_stay_off_the_example_site(example_build: object) -> None:
    site = example_build.site  # type: ignore[attr-defined]
    summary = json.loads((site / "summary.json").read_text(encoding="utf-8"))
    rows = summary if isinstance(summary, list) else summary["datasets"]
    assert len(rows) == 15
    assert not (site / "datasets" / "operations-dosing-pump-draft").exists()
    assert (example_build.data / "operations" / "dosing_pump.draft.csv").is_file()  # type: ignore[attr-defined]


def test_pack_unpacks_to_a_folder_named_after_the_site(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", LINE_CSV)
    (data / "site.toml").write_text('title = "Qualité de l\'eau: 2026 checks"\n', encoding="utf-8")
    out = tmp_path / "_out"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    assert cli("pack", out, "-o", tmp_path / "mail.zip").code == 0
    with zipfile.ZipFile(tmp_path / "mail.zip") as zf:
        tops = {n.split("/", 1)[0] for n in zf.namelist()}
    assert tops == {"qualite-de-l-eau-2026-checks"}  # the title's slug, not "_out"
    assert folder_name(out) == "qualite-de-l-eau-2026-checks"


def test_pack_folder_falls_back_to_site_without_a_title(tmp_path: Path) -> None:
    (tmp_path / "build.json").write_text('{"title": "!!!"}', encoding="utf-8")
    assert folder_name(tmp_path) == "site"
    (tmp_path / "build.json").write_text("[]", encoding="utf-8")
    assert folder_name(tmp_path) == "site"
    (tmp_path / "build.json").unlink()
    assert folder_name(tmp_path) == "site"
