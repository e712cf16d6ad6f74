"""Clean failure everywhere, and resources kept in bounds, for inputs that are made at test time: a header
line wider than the reader's first look, thousands of unknown keys, terminal control characters in file
names, a path too long for a folder name, a full disk, a read-only disk, an output path that loops.

Every build runs through the real command line in this process; the full and read-only disks are real
(a small tmpfs mounted for the test when running as root, otherwise a file-size limit, ``RLIMIT_FSIZE``, and
folder permissions), never a stand-in.
"""

from __future__ import annotations

import contextlib
import io
import os
import resource
import shutil
import signal
import subprocess
from collections.abc import Iterator
from pathlib import Path

import pytest
from openpyxl import load_workbook
from test_corpus import CONTROL, GOOD, build_case, expect, messages, run

from sitegen.report.xlsx import CELL_LIMIT, workbook_bytes


def test_a_header_wider_than_the_first_look_is_counted_whole(tmp_path: Path) -> None:
    """250 columns of 290-character names: about 73 kB of header, past the reader's 64 kB first look."""

    def prepare(data: Path) -> None:
        names = [f"c{i:03d}" + "_" * 286 for i in range(250)]
        (data / "wide.csv").write_text(",".join(names) + "\n" + ",".join("1" * 250) + "\n", encoding="utf-8")

    result, site, rows = build_case(tmp_path, prepare)
    expect(result, site, rows, "wide", "error", ("wide.csv has 250 columns, over the limit of 200", "max_columns"))


def test_thousands_of_unknown_keys_are_counted_not_listed(tmp_path: Path) -> None:
    def prepare(data: Path) -> None:
        (data / "keys.csv").write_text(GOOD, encoding="utf-8")
        lines = ['model = "y ~ x"'] + [f"unknown_{i} = {i}" for i in range(5000)]
        (data / "keys.toml").write_text("\n".join(lines) + "\n", encoding="utf-8")

    result, site, rows = build_case(tmp_path, prepare)
    expect(result, site, rows, "keys", "warn", ("unknown sidecar key",))
    texts = [m["text"] for m in messages(site, "keys")]
    assert sum("unknown sidecar key '" in t for t in texts) == 10
    assert any("4,990 more unknown sidecar keys were ignored" in t for t in texts)
    assert (site / "datasets" / "keys" / "index.html").stat().st_size < 1_000_000


def test_a_huge_site_description_is_refused_with_its_key(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    shutil.copyfile(CONTROL, data / CONTROL.name)
    (data / "site.toml").write_text('description = "' + "word " * 20_000 + '"\n', encoding="utf-8")
    result = run(data, tmp_path / "site")
    assert result.code == 2
    assert "site.toml: key 'description' holds a text of 100,000 characters, more than the 50,000" in result.output
    assert not (tmp_path / "site").exists()


def test_a_deeply_nested_site_toml_stops_the_build_with_a_message(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    shutil.copyfile(CONTROL, data / CONTROL.name)
    (data / "site.toml").write_text("x = " + "[" * 5000 + "]" * 5000 + "\n", encoding="utf-8")
    result = run(data, tmp_path / "site")
    assert result.code == 2
    assert "site.toml is nested too deeply to be read" in result.output
    assert "Traceback" not in result.output
    assert "internal error" not in result.output


def test_control_characters_in_file_names_are_printed_escaped(tmp_path: Path) -> None:
    name = "bad\x1b[2J\x1b]0;owned\x07\u202ename.csv"

    def prepare(data: Path) -> None:
        (data / name).write_text("x,y\n1,oops\n2,4\n3,6\n", encoding="utf-8")

    result, _, rows = build_case(tmp_path, prepare)
    assert any(r["status"] == "error" for r in rows.values())
    assert "\x1b" not in result.output
    assert "\x07" not in result.output
    assert "\u202e" not in result.output
    assert "bad\\x1b[2J\\x1b]0;owned\\x07\\u202ename.csv" in result.output


def test_a_path_too_long_for_a_folder_name_still_gets_its_folder(tmp_path: Path) -> None:
    """A 200-character folder holding a 240-character file: the slug would be 441 characters, more than
    a file system allows in one name; it is cut (with a hash of the whole), and every dataset builds."""
    long_dir = "f" * 200

    def prepare(data: Path) -> None:
        (data / long_dir).mkdir()
        (data / long_dir / ("g" * 240 + ".csv")).write_text(GOOD, encoding="utf-8")

    result, site, rows = build_case(tmp_path, prepare)
    assert result.code == 0, result.output
    [slug] = [s for s in rows if s.startswith("fff")]
    assert len(slug) <= 160
    assert rows[slug]["status"] == "ok"
    assert (site / "datasets" / slug / "index.html").is_file()


def test_spreadsheet_cells_stay_within_the_cell_limit() -> None:
    """Excel's documented limit is 32,767 characters per cell; openpyxl reads the workbook back."""
    data = workbook_bytes(["note"], [["x" * 100_000], ["\U0001f600" * 20_000], ["short"]])
    sheet = load_workbook(io.BytesIO(data), read_only=True).active
    assert sheet is not None
    cells = [row[0] for row in sheet.iter_rows(min_row=2, values_only=True)]
    assert isinstance(cells[0], str)
    assert len(cells[0]) == CELL_LIMIT
    assert cells[0].endswith("…")
    assert isinstance(cells[1], str)
    assert len(cells[1].encode("utf-16-le")) // 2 <= CELL_LIMIT
    assert cells[2] == "short"


# --- the output side: full and read-only disks, a looping link ----------------------------------


def _can_mount() -> bool:
    return os.geteuid() == 0 and shutil.which("mount") is not None


@contextlib.contextmanager
def _tmpfs(where: Path, size: str, *, read_only: bool = False) -> Iterator[Path]:
    where.mkdir()
    options = f"size={size}" + (",ro" if read_only else "")
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(where)], check=False)
    if done.returncode != 0:
        pytest.skip("cannot mount a tmpfs here")
    try:
        yield where
    finally:
        subprocess.run(["umount", "-l", str(where)], check=False)


@contextlib.contextmanager
def _file_size_limit(n_bytes: int) -> Iterator[None]:
    """A real per-process limit on file size: writing past it fails with EFBIG (SIGXFSZ ignored)."""
    old_limit = resource.getrlimit(resource.RLIMIT_FSIZE)
    old_handler = signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (n_bytes, old_limit[1]))
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_FSIZE, old_limit)
        signal.signal(signal.SIGXFSZ, old_handler)


def _data(tmp_path: Path) -> Path:
    data = tmp_path / "data"
    data.mkdir()
    shutil.copyfile(CONTROL, data / CONTROL.name)
    (data / "second.csv").write_text(GOOD, encoding="utf-8")
    return data


def _assert_clean(output: str) -> None:
    assert "Traceback" not in output
    assert "internal error" not in output


def test_a_full_disk_is_named_and_the_next_build_with_space_succeeds(tmp_path: Path) -> None:
    data = _data(tmp_path)
    if _can_mount():
        with _tmpfs(tmp_path / "disk", "600k") as disk:
            site = disk / "site"
            result = run(data, site)
            assert result.code == 2, result.output
            _assert_clean(result.output)
            assert f"the disk holding {site} is full" in result.output
            assert "free some space there" in result.output
            assert not site.exists()
            assert list(disk.iterdir()) == []  # the half-built folder was removed: the space is back
            subprocess.run(["mount", "-o", "remount,size=64m", str(disk)], check=True)
            again = run(data, site)
            assert again.code == 0, again.output
            assert (site / "index.html").is_file()
            return
    site = tmp_path / "site"
    with _file_size_limit(300_000):  # the chart library alone is about 900 kB
        result = run(data, site)
    assert result.code == 2, result.output
    _assert_clean(result.output)
    assert "allows no file that large" in result.output
    again = run(data, site)
    assert again.code == 0, again.output


def test_a_read_only_output_is_named_with_what_to_do(tmp_path: Path) -> None:
    data = _data(tmp_path)
    if _can_mount():
        with _tmpfs(tmp_path / "ro", "1m", read_only=True) as disk:
            result = run(data, disk / "site")
            assert result.code == 2, result.output
            _assert_clean(result.output)
            assert "is on a read-only disk" in result.output
            assert "choose an output folder on a disk you can write to with -o" in result.output
            return
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    result = run(data, locked / "site")
    locked.chmod(0o755)
    assert result.code == 2
    _assert_clean(result.output)
    assert "no permission to write" in result.output


@pytest.mark.parametrize("shape", ["itself", "a pair"])
def test_an_output_path_that_loops_is_refused_by_name(tmp_path: Path, shape: str) -> None:
    data = _data(tmp_path)
    if shape == "itself":
        (tmp_path / "loop").symlink_to("loop")
        out = tmp_path / "loop"
    else:
        (tmp_path / "a").symlink_to("b")
        (tmp_path / "b").symlink_to("a")
        out = tmp_path / "a" / "site"
    result = run(data, out)
    assert result.code == 2
    _assert_clean(result.output)
    assert f"the output folder {out} cannot be followed: a symbolic link on its way loops" in result.output
