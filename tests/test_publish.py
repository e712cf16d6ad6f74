"""Publishing safely: the build lock, kill -9 at any moment, pack, preview and watch.

Everything runs for real: real folders, a real subprocess killed with SIGKILL,
a real zip unpacked elsewhere, a real HTTP server on 127.0.0.1.
"""

from __future__ import annotations

import csv
import hashlib
import os
import signal
import subprocess
import sys
import threading
import time
import urllib.request
import zipfile
from pathlib import Path

import pytest
from conftest import cli

from sitegen.publish import build_dir_for
from sitegen.watch import snapshot, watch


def _dataset_folder(root: Path, count: int) -> Path:
    """Invented straight-line datasets, enough that a build takes a moment."""
    data = root / "data"
    data.mkdir()
    for i in range(count):
        rows = "\n".join(f"{x},{2 + 0.5 * x + ((x * 7 + i) % 5 - 2) * 0.1:.3f}" for x in range(1, 31))
        (data / f"set_{i:02d}.csv").write_text("x,y\n" + rows + "\n", encoding="utf-8")
    return data


def _digest(site: Path) -> dict[str, str]:
    return {
        p.relative_to(site).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(site.rglob("*"))
        if p.is_file() and p.name != "build.json"
    }


def test_second_build_into_a_locked_folder_is_refused(tmp_path: Path) -> None:
    data = _dataset_folder(tmp_path, 2)
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    before = _digest(out)
    holder = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        work = build_dir_for(out)
        work.mkdir()
        (work / ".owner").write_text(str(holder.pid), encoding="utf-8")
        res = cli("build", data, "-o", out, "-j", "1")
        assert res.code == 2
        assert "another sitegen build" in res.stream
        assert "Traceback" not in res.output
        assert _digest(out) == before
    finally:
        holder.kill()
        holder.wait()
    # The holder is gone: its leftover folder counts as stale and the next build proceeds.
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    assert not build_dir_for(out).exists()


@pytest.mark.slow
def test_kill_9_at_any_moment_leaves_the_published_site_whole(tmp_path: Path) -> None:
    data = _dataset_folder(tmp_path, 12)
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    published = _digest(out)
    cmd = [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(out), "--refit", "-q", "-j", "2"]
    for delay in (0.05, 0.3, 0.8, 1.5, 2.5):
        proc = subprocess.Popen(cmd, start_new_session=True)
        time.sleep(delay)
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
        # Whatever the moment, the site is either the old one or a complete new one.
        now = _digest(out)
        assert set(now) == set(published)
        with (out / "summary.csv").open(encoding="utf-8") as fh:
            assert len(list(csv.DictReader(fh))) == 12
    res = cli("build", data, "-o", out, "-j", "1")
    assert res.code == 0, res.output
    assert not build_dir_for(out).exists()


def test_pack_makes_a_zip_that_works_unzipped_anywhere(tmp_path: Path) -> None:
    data = _dataset_folder(tmp_path, 2)
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    target = tmp_path / "mail" / "report.zip"
    target.parent.mkdir()
    res = cli("pack", out, "-o", target)
    assert res.code == 0, res.output
    assert "MB" in res.stream
    unpacked = tmp_path / "elsewhere"
    with zipfile.ZipFile(target) as zf:
        assert zf.testzip() is None
        names = zf.namelist()
        assert all(not n.startswith("/") and ".." not in n for n in names)
        zf.extractall(unpacked)
    root = unpacked / "site"
    assert (root / "index.html").is_file()
    assert (root / "assets" / "vendor" / "vega-bundle.js").is_file()
    assert {p.relative_to(root).as_posix() for p in root.rglob("*") if p.is_file()} == {
        p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file() and p.name != ".sitegen"
    }
    small = cli("pack", out, "-o", tmp_path / "small.zip", "--budget-mb", "0.01")
    assert small.code == 0
    assert "larger than 0.01 MB" in small.stream


def test_pack_refuses_a_folder_that_is_not_a_site(tmp_path: Path) -> None:
    (tmp_path / "notasite").mkdir()
    res = cli("pack", tmp_path / "notasite", "-o", tmp_path / "x.zip")
    assert res.code == 2
    assert "not a site built by sitegen" in res.stream
    assert not (tmp_path / "x.zip").exists()


def test_preview_serves_the_site_on_loopback(tmp_path: Path) -> None:
    from sitegen.preview import make_server

    data = _dataset_folder(tmp_path, 1)
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    server = make_server(out, 0)
    host, port = server.server_address[:2]
    assert host == "127.0.0.1"
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/index.html", timeout=5) as resp:
            body = resp.read().decode("utf-8")
        assert "set_00" in body
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/summary.csv", timeout=5) as resp:
            assert resp.read().startswith(b"dataset,title,status")
    finally:
        server.shutdown()
        server.server_close()


def test_watch_rebuilds_after_a_change_and_ignores_editor_files(tmp_path: Path) -> None:
    data = _dataset_folder(tmp_path, 2)
    out = tmp_path / "site"
    codes: list[int] = []

    def build() -> int:
        res = cli("build", data, "-o", out, "-j", "1")
        codes.append(res.code)
        return res.code

    before = snapshot(data)
    (data / ".set_00.csv.swp").write_bytes(b"\x00garbage")
    (data / "set_00.csv~").write_text("half", encoding="utf-8")
    assert snapshot(data) == before  # editor files are not watched
    ticks = iter(range(1000))

    def fake_sleep(_: float) -> None:
        n = next(ticks)
        if n == 1:  # a half-written file appears, then is completed
            (data / "new.csv").write_text("x,y\n1,", encoding="utf-8")
        if n == 2:
            (data / "new.csv").write_text("x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n", encoding="utf-8")

    builds = watch(data, out, build, interval=0.0, settle=0.0, max_builds=2, clock=lambda: 0.0, sleep=fake_sleep)
    assert builds == 2
    assert codes == [0, 0]
    with (out / "summary.csv").open(encoding="utf-8") as fh:
        assert {row["dataset"] for row in csv.DictReader(fh)} == {"new", "set-00", "set-01"}


def test_pack_to_html_writes_one_self_contained_file(tmp_path: Path) -> None:
    import json
    import re

    data = _dataset_folder(tmp_path, 3)
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    target = tmp_path / "report.html"
    res = cli("pack", out, "-o", target)
    assert res.code == 0, res.output
    text = target.read_text(encoding="utf-8")
    # Nothing is loaded from a file or a server: no src attributes, no stylesheet links.
    assert re.search(r"<script[^>]*\bsrc=", text) is None
    assert re.search(r"<link[^>]*stylesheet", text) is None
    # Every link stays inside the file (anchors) or is an outside reference the reader may follow.
    hrefs = re.findall(r'href="([^"]*)"', text)
    assert hrefs
    assert all(h.startswith(("#", "https://", "http://", "mailto:")) for h in hrefs), [
        h for h in hrefs if not h.startswith("#")
    ][:5]
    anchors = set(re.findall(r'\bid="([^"]+)"', text))
    assert len(anchors) == len(re.findall(r'\bid="([^"]+)"', text))  # ids are unique
    assert all(h[1:] in anchors for h in hrefs if h.startswith("#") and len(h) > 1)
    for slug in ("set-00", "set-01", "set-02"):
        assert f'id="ds-{slug}"' in text
    for block in re.findall(r'<script type="application/json"[^>]*>(.*?)</script>', text, re.S):
        json.loads(block)
    assert "Use with care." in text  # the caution notice travels with the file


def test_pack_to_html_refuses_a_large_site(tmp_path: Path) -> None:
    from sitegen.single import MAX_DATASETS

    data = _dataset_folder(tmp_path, MAX_DATASETS + 1)
    out = tmp_path / "site"
    assert cli("build", data, "-o", out).code == 0
    res = cli("pack", out, "-o", tmp_path / "report.html")
    assert res.code == 2
    assert "send the site as a zip" in res.stream
    assert not (tmp_path / "report.html").exists()
