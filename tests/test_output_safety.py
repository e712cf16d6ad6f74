"""The output folder: refused (exit 2, nothing touched) when unsafe, accepted when safe.

Contract (DESIGN.md, "Command line"): the output folder is refused when it is
inside the data folder, contains it, or is a non-empty folder that sitegen did
not make. "Nothing touched" is checked by recording every path and every file's
bytes under the test's temporary folder before and after the refused build.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

import pytest
from conftest import cli, tree_snapshot, write_csv

Where = Callable[[Path, Path], Path]  # (tmp_path, data folder) -> output path


def _inside(tmp: Path, data: Path) -> Path:
    return data / "site"


def _inside_existing_section(tmp: Path, data: Path) -> Path:
    return data / "section" / "site"


def _inside_hidden(tmp: Path, data: Path) -> Path:
    return data / "_site"


def _inside_via_dotdot(tmp: Path, data: Path) -> Path:
    return tmp / "elsewhere" / ".." / "data" / "site"


def _equal(tmp: Path, data: Path) -> Path:
    return data


def _equal_with_slash(tmp: Path, data: Path) -> Path:
    return Path(str(data) + os.sep + ".")


def _containing(tmp: Path, data: Path) -> Path:
    return tmp


def _link_into_data(tmp: Path, data: Path) -> Path:
    (data / "out").mkdir()
    link = tmp / "out-link"
    link.symlink_to(data / "out", target_is_directory=True)
    return link


def _link_to_data(tmp: Path, data: Path) -> Path:
    link = tmp / "data-link"
    link.symlink_to(data, target_is_directory=True)
    return link


def _not_made_by_sitegen(tmp: Path, data: Path) -> Path:
    out = tmp / "site"
    out.mkdir()
    (out / "thesis.docx").write_bytes(b"years of work")
    (out / "sub").mkdir()
    (out / "sub" / "more.txt").write_text("more", encoding="utf-8")
    return out


def _only_a_hidden_file(tmp: Path, data: Path) -> Path:
    out = tmp / "site"
    out.mkdir()
    (out / ".notes").write_text("mine", encoding="utf-8")
    return out


def _an_existing_file(tmp: Path, data: Path) -> Path:
    out = tmp / "site"
    out.write_bytes(b"not a folder")
    return out


def _a_link_to_a_file(tmp: Path, data: Path) -> Path:
    target = tmp / "precious.txt"
    target.write_bytes(b"keep me")
    link = tmp / "site"
    link.symlink_to(target)
    return link


@pytest.mark.parametrize(
    "where",
    [
        pytest.param(_inside, id="inside-data"),
        pytest.param(_inside_existing_section, id="inside-a-section-of-data"),
        pytest.param(_inside_hidden, id="inside-data-hidden-name"),
        pytest.param(_inside_via_dotdot, id="inside-data-via-dotdot"),
        pytest.param(_equal, id="equal-to-data"),
        pytest.param(_equal_with_slash, id="equal-to-data-spelled-differently"),
        pytest.param(_containing, id="contains-data"),
        pytest.param(_link_into_data, id="symlink-into-data"),
        pytest.param(_link_to_data, id="symlink-to-data"),
        pytest.param(_not_made_by_sitegen, id="non-empty-not-sitegen"),
        pytest.param(_only_a_hidden_file, id="only-a-hidden-file"),
        pytest.param(_an_existing_file, id="existing-file"),
        pytest.param(_a_link_to_a_file, id="symlink-to-a-file"),
    ],
)
def test_unsafe_output_is_refused_and_nothing_is_touched(where: Where, small_data: Path, tmp_path: Path) -> None:
    out = where(tmp_path, small_data)
    before = tree_snapshot(tmp_path)
    result = cli("build", small_data, "-o", out, "-j", "1")
    assert result.code == 2, result.output
    assert "Traceback" not in result.output
    assert result.stream.strip(), "the refusal explains itself"
    assert tree_snapshot(tmp_path) == before


def test_refusal_names_the_problem(small_data: Path, tmp_path: Path) -> None:
    inside = cli("build", small_data, "-o", small_data / "site")
    assert "inside" in inside.stream
    busy = _not_made_by_sitegen(tmp_path, small_data)
    refused = cli("build", small_data, "-o", busy)
    assert "not empty" in refused.stream or "sitegen" in refused.stream


def test_folder_made_by_sitegen_is_rebuilt(small_data: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    assert cli("build", small_data, "-o", site, "-j", "1").code == 0
    write_csv(small_data / "delta.csv", "p,q\n1,1.9\n2,4.2\n3,5.8\n4,8.1\n5,9.9\n")
    result = cli("build", small_data, "-o", site, "-j", "1")
    assert result.code == 0, result.output
    assert (site / "datasets" / "delta" / "fit.json").is_file()
    # Beside the site only the spare is left: the previous site, whole, and no lock.
    assert sorted(p.name for p in tmp_path.iterdir()) == [".site.sitegen-build", "data", "site"]
    spare = tmp_path / ".site.sitegen-build"
    assert (spare / "build.json").is_file()
    assert not (spare / "datasets" / "delta").exists()
    assert not (spare / ".owner").exists()


def test_empty_existing_folder_is_accepted(small_data: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    site.mkdir()
    result = cli("build", small_data, "-o", site, "-j", "1")
    assert result.code == 0, result.output
    assert (site / "index.html").is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data", "site"]


def test_missing_parent_folders_are_created(small_data: Path, tmp_path: Path) -> None:
    site = tmp_path / "new" / "deeper" / "site"
    assert cli("build", small_data, "-o", site, "-j", "1").code == 0
    assert (site / "index.html").is_file()


def test_sibling_with_a_shared_name_prefix_is_not_inside(small_data: Path, tmp_path: Path) -> None:
    site = tmp_path / "data-site"  # starts with the data folder's name, but is beside it
    assert str(site).startswith(str(small_data))
    result = cli("build", small_data, "-o", site, "-j", "1")
    assert result.code == 0, result.output


def test_data_folder_beside_a_prefix_named_output_is_not_contained(tmp_path: Path) -> None:
    data = tmp_path / "site-data"
    write_csv(data / "alpha.csv", "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n")
    site = tmp_path / "site"
    result = cli("build", data, "-o", site, "-j", "1")
    assert result.code == 0, result.output
