"""build.json's records as typed values (sitegen/records.py): read back exactly as written, and a record that
is garbled, of another shape or of an older version means a full build, never a crash (issue 17, item 1).

Real folders, the real build (``run_build`` in this process, one job) and the real CLI.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
from conftest import cli, site_bytes

from sitegen.build import BuildOptions, run_build
from sitegen.records import BuildRecord, DatasetRecord, FileStat, InputRecord, InputStat, read_previous


def _build(data: Path, site: Path) -> int:
    """How many datasets the build fitted (the others were reused)."""
    return run_build(BuildOptions(data, site, jobs=1)).fitted


def _body(site: Path) -> dict[str, Any]:
    body = json.loads((site / "build.json").read_text(encoding="utf-8"))
    assert isinstance(body, dict)
    return body


def test_build_json_reads_back_as_the_same_json(small_data: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    assert _build(small_data, site) == 3
    body = _body(site)
    record = BuildRecord.from_json(body)
    assert record.as_json() == body  # every key survives the typed form, nothing is added
    assert [d.dataset for d in record.datasets] == ["alpha", "beta", "section-gamma"]
    alpha = record.datasets[0]
    assert alpha.source == "alpha.csv"
    assert isinstance(alpha.fit_stat, FileStat)
    assert alpha.fit_stat.size == (site / "datasets" / "alpha" / "fit.json").stat().st_size
    assert record.files["datasets/alpha/fit.json"] == alpha.fit_stat
    prev = read_previous(site)
    assert prev.record == record
    assert set(prev.entries) == {"alpha", "beta", "section-gamma"}


def test_an_input_record_keeps_a_hash_only_while_the_stat_is_unchanged() -> None:
    stat = InputStat(10, 1, 2, 3, 4)
    sha = "a" * 64
    record = InputRecord.from_json({"csv": list(stat), "csv_sha256": sha, "sidecar": None, "sidecar_sha256": ""})
    assert record.csv == stat
    assert record.known_csv_sha256(stat) == sha
    assert record.known_csv_sha256(stat._replace(ctime_ns=5)) is None
    assert record.known_csv_sha256(None) is None
    assert record.known_sidecar_sha256(None) is None
    # a garbled record is no record: every file is hashed again
    garbled_records: list[object] = [None, [], "x", {"csv": [1, 2], "csv_sha256": sha}, {"csv": ["1", 2, 3, 4, 5]}]
    for garbled in garbled_records:
        assert InputRecord.from_json(garbled).known_csv_sha256(stat) is None


def _drop(key: str) -> Callable[[dict[str, Any]], None]:
    def edit(body: dict[str, Any]) -> None:
        del body["datasets"][1][key]

    return edit


def _set(path: tuple[str | int, ...], value: object) -> Callable[[dict[str, Any]], None]:
    def edit(body: dict[str, Any]) -> None:
        here: Any = body
        for step in path[:-1]:
            here = here[step]
        here[path[-1]] = value

    return edit


GARBLED: dict[str, Callable[[dict[str, Any]], None]] = {
    "an entry without its fingerprint": _drop("fingerprint"),
    "an entry without its index values": _drop("index"),
    "an entry that is a list": _set(("datasets", 0), ["alpha"]),
    "a fingerprint that is a number": _set(("datasets", 2, "fingerprint"), 12),
    "a manifest stat of three numbers": _set(("files", "index.html"), [1, 2, 3]),
    "a manifest that is a list": _set(("files",), []),
    "datasets that are an object": _set(("datasets",), {}),
    "another generator": _set(("generator",), "other"),
    "a mail budget that is text": _set(("mail_budget_megabytes",), "20"),
    "a build time that is a number": _set(("built_at",), 0),
}


@pytest.mark.parametrize("how", sorted(GARBLED))
def test_a_garbled_build_json_means_a_full_build(small_data: Path, tmp_path: Path, how: str) -> None:
    site = tmp_path / "site"
    assert _build(small_data, site) == 3
    fresh = site_bytes(site, skip=("build.json",))
    body = _body(site)
    GARBLED[how](body)
    (site / "build.json").write_text(json.dumps(body), encoding="utf-8")
    assert read_previous(site).record is None
    assert _build(small_data, site) == 3  # nothing trusted: every dataset fitted again
    assert site_bytes(site, skip=("build.json",)) == fresh
    assert BuildRecord.from_json(_body(site)).as_json() == _body(site)
    assert _build(small_data, site) == 0  # and the record written is whole again


def test_a_garbled_input_record_only_means_hashing_again(small_data: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    assert _build(small_data, site) == 3
    body = _body(site)
    body["datasets"][0]["stat"] = "garbled"
    (site / "build.json").write_text(json.dumps(body), encoding="utf-8")
    assert read_previous(site).entries["alpha"].inputs == InputRecord()
    assert _build(small_data, site) == 0  # the hashes still match: nothing to fit


def test_a_build_json_of_an_earlier_version_is_read_as_none(tmp_path: Path) -> None:
    """Sizes alone in the manifest (as an earlier version wrote them) are not a record of this one."""
    (tmp_path / "build.json").write_text(
        json.dumps({"generator": "sitegen", "datasets": [], "files": {"index.html": 1234}, "libraries": {}}),
        encoding="utf-8",
    )
    assert read_previous(tmp_path).record is None
    with pytest.raises(ValueError, match="lacks fingerprint"):
        DatasetRecord.from_json({"dataset": "a"})


def test_pack_and_its_mail_budget_read_the_record(small_data: Path, tmp_path: Path) -> None:
    """``pack`` reads the budget from build.json; one too small for the zip warns."""
    (small_data / "site.toml").write_text("mail_budget_megabytes = 0.001\n", encoding="utf-8")
    site = tmp_path / "site"
    assert cli("build", small_data, "-o", site, "-q").code == 0
    assert BuildRecord.from_json(_body(site)).mail_budget_megabytes == 0.001
    res = cli("pack", site, "-o", tmp_path / "site.zip")
    assert res.code == 0
    assert "larger than 0.001 MB" in res.output
