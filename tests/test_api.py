"""The Python interface: ``sitegen.build_site`` builds what ``sitegen build`` builds and says so in types."""

from __future__ import annotations

import csv
import shutil
from pathlib import Path

import pytest
from conftest import EXAMPLE, LINE_CSV, write_csv

import sitegen
from sitegen.errors import ConfigError, OutputFolderError, SiteConfigError


def test_build_site_returns_each_dataset_with_its_status_requirements_and_files(tmp_path: Path) -> None:
    data = tmp_path / "data"
    shutil.copytree(EXAMPLE / "calibration", data / "calibration")
    write_csv(data / "broken.csv", "x,y\n1,a\n2,b\n")
    seen: list[tuple[int, int]] = []
    result = sitegen.build_site(
        data, tmp_path / "site", jobs=1, progress=lambda done, total, _: seen.append((done, total))
    )
    assert result.index == tmp_path / "site" / "index.html"
    assert result.index.is_file()
    assert result.fitted == len(result.datasets)
    assert result.reused == 0
    assert seen
    assert seen[-1][0] == seen[-1][1] == len(result.datasets)
    # The outcomes agree with summary.csv, the contract's own record of the build.
    with (result.out_dir / "summary.csv").open(encoding="utf-8", newline="") as f:
        rows = {row["dataset"]: row for row in csv.DictReader(f)}
    assert {d.dataset for d in result.datasets} == set(rows)
    for d in result.datasets:
        assert d.status == rows[d.dataset]["status"]
        assert d.requirements_state == rows[d.dataset]["requirements"]
        assert d.page.is_file()
        assert d.fit_json.parent == d.folder
    broken = result.dataset("broken")
    assert broken.status == "error"
    assert result.failed == (broken,)
    declared = result.dataset("calibration-nitrate-uv")  # its sidecar declares requirements
    assert declared.requirements
    assert all(q.name for q in declared.requirements)
    assert declared.requirements_state == ("met" if all(q.met for q in declared.requirements) else "unmet")
    assert result.dataset("calibration-free-chlorine-dpd").requirements == ()
    with pytest.raises(KeyError):
        result.dataset("no-such-dataset")


def test_build_site_again_reuses_everything(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "line.csv", LINE_CSV)
    sitegen.build_site(data, tmp_path / "site", jobs=1)
    again = sitegen.build_site(str(data), str(tmp_path / "site"))
    assert (again.fitted, again.reused) == (0, 1)
    assert again.datasets[0].status == "ok"


def test_build_site_raises_the_error_tree(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="does not exist"):
        sitegen.build_site(tmp_path / "missing", tmp_path / "site")
    data = tmp_path / "data"
    write_csv(data / "line.csv", LINE_CSV)
    with pytest.raises(ConfigError, match="jobs"):
        sitegen.build_site(data, tmp_path / "site", jobs=0)
    with pytest.raises(OutputFolderError):
        sitegen.build_site(data, data)  # the output folder may not be the data folder
    (data / "site.toml").write_text("title = [unclosed\n", "utf-8")
    with pytest.raises(SiteConfigError):
        sitegen.build_site(data, tmp_path / "site")
    assert not (tmp_path / "site").exists()
