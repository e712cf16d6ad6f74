"""A rebuild trusts a recorded hash only while the file's size, time and inode are unchanged.

Real files in tmp folders, the real CLI. A same-size edit of a CSV, or of a stored fit.json,
must still be noticed (its modification time moves), as git and make notice edits (common
practice: stat information first, content hash when it differs).
"""

from __future__ import annotations

import json
import os
import time
from pathlib import Path

from conftest import cli, write_csv


def _datasets(site: Path) -> dict[str, dict[str, object]]:
    body = json.loads((site / "build.json").read_text(encoding="utf-8"))
    return {e["dataset"]: e for e in body["datasets"]}


def _data(tmp_path: Path) -> Path:
    data = tmp_path / "data"
    data.mkdir()
    write_csv(data / "alpha.csv", "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n")
    write_csv(data / "beta.csv", "x,y\n1,1.1\n2,2.0\n3,2.9\n4,4.2\n5,5.0\n")
    old = time.time() - 60  # settled files, as data usually are when a build runs
    for p in data.iterdir():
        os.utime(p, (old, old))
    return data


def test_same_size_edit_of_a_csv_is_refitted(tmp_path: Path) -> None:
    data, site = _data(tmp_path), tmp_path / "site"
    assert cli("build", data, "-o", site).code == 0
    assert cli("build", data, "-o", site).code == 0  # no-op; stat records now settled
    assert all(e["reused"] for e in _datasets(site).values())
    path = data / "alpha.csv"
    text = path.read_text(encoding="utf-8")
    path.write_text(text.replace("3.9", "9.3"), encoding="utf-8")  # same size, new content, new time
    assert path.stat().st_size == len(text)
    assert cli("build", data, "-o", site).code == 0
    entries = _datasets(site)
    assert entries["alpha"]["reused"] is False
    assert entries["beta"]["reused"] is True
    assert "9.3" in (site / "datasets" / "alpha" / "observations.csv").read_text(encoding="utf-8")


def test_same_size_damage_to_a_stored_fit_json_means_a_refit(tmp_path: Path) -> None:
    data, site = _data(tmp_path), tmp_path / "site"
    assert cli("build", data, "-o", site).code == 0
    stored = site / "datasets" / "beta" / "fit.json"
    before = stored.read_bytes()
    stored.write_bytes(before.replace(b'"n":5', b'"n":6'))  # same size, wrong content
    assert cli("build", data, "-o", site).code == 0
    assert _datasets(site)["beta"]["reused"] is False
    assert json.loads(stored.read_text(encoding="utf-8"))["n"] == 5


def test_unchanged_inputs_are_not_read_again(tmp_path: Path) -> None:
    """The recorded hash stands while the stat matches: build.json keeps it with the stat."""
    data, site = _data(tmp_path), tmp_path / "site"
    time.sleep(2.1)  # the change time (which cannot be set back) must be older than the 2 s racy window
    assert cli("build", data, "-o", site).code == 0
    record = _datasets(site)["alpha"]["stat"]
    assert isinstance(record, dict)
    st = (data / "alpha.csv").stat()
    assert record["csv"] == [st.st_size, st.st_mtime_ns, st.st_ino, st.st_ctime_ns, st.st_dev]
    assert record["csv_sha256"] == _datasets(site)["alpha"]["input_sha256"]


def test_an_edit_that_puts_the_old_modification_time_back_is_noticed(tmp_path: Path) -> None:
    """cp -p, rsync -t --inplace and os.utime restore the modification time; the change time still moves."""
    data, site = _data(tmp_path), tmp_path / "site"
    assert cli("build", data, "-o", site).code == 0
    assert cli("build", data, "-o", site).code == 0
    path = data / "alpha.csv"
    before = path.stat()
    text = path.read_text(encoding="utf-8")
    with path.open("r+", encoding="utf-8") as fh:  # in place: same inode, same size
        fh.write(text.replace("3.9", "9.3"))
    os.utime(path, ns=(before.st_atime_ns, before.st_mtime_ns))
    after = path.stat()
    assert (after.st_size, after.st_mtime_ns, after.st_ino) == (before.st_size, before.st_mtime_ns, before.st_ino)
    time.sleep(0.01)
    assert cli("build", data, "-o", site).code == 0
    assert _datasets(site)["alpha"]["reused"] is False
    assert "9.3" in (site / "datasets" / "alpha" / "observations.csv").read_text(encoding="utf-8")
