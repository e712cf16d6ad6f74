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

from sitegen.publish import build_dir_for, lock_path_for
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
    lock = lock_path_for(out)
    # Another process holds the build lock with its id in it (as a running build does) and has a build folder.
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            f"import fcntl,os,sys,time; fd=os.open({str(lock)!r}, os.O_RDWR|os.O_CREAT); "
            "fcntl.flock(fd, fcntl.LOCK_EX); os.write(fd, str(os.getpid()).encode()); print('held', flush=True); "
            "time.sleep(60)",
        ],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout is not None
        assert holder.stdout.readline().strip() == "held"
        work = build_dir_for(out)
        work.mkdir(exist_ok=True)
        res = cli("build", data, "-o", out, "-j", "1")
        assert res.code == 2
        assert f"another sitegen build (process {holder.pid})" in res.stream
        assert "Traceback" not in res.output
        assert _digest(out) == before
        assert work.exists()  # the refused build did not touch the holder's folder
    finally:
        holder.kill()
        holder.communicate()
    # The holder is gone (the kernel released its lock): its leftover folder is stale and the next build proceeds.
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    assert not (build_dir_for(out) / ".owner").exists()  # the build folder is kept as the spare, unowned
    assert not lock.exists()


def test_a_build_with_nothing_to_do_touches_nothing_beside_the_site_but_its_lock(tmp_path: Path) -> None:
    """A rebuild with nothing to do makes no build folder (on a second build there is no spare yet) and
    leaves the spare of a later one as it was; a build refused meanwhile names the holder from the lock."""
    data = _dataset_folder(tmp_path, 2)
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    assert not build_dir_for(out).exists()  # a first build leaves no spare
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    assert not build_dir_for(out).exists()  # nothing to do: no folder made and removed
    assert cli("build", data, "-o", out, "-j", "1", "--refit").code == 0
    spare = build_dir_for(out)
    before = {p: (p.stat().st_ino, p.stat().st_mtime_ns) for p in [spare, *spare.rglob("*")]}
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    assert {p: (p.stat().st_ino, p.stat().st_mtime_ns) for p in [spare, *spare.rglob("*")]} == before
    assert not lock_path_for(out).exists()


def test_builds_started_together_never_both_write(tmp_path: Path) -> None:
    """Pairs of builds racing for one output folder: at most one writes, and the site is whole after each round."""
    data = _dataset_folder(tmp_path, 4)
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    cmd = [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(out), "--refit", "-q", "-j", "1"]
    for _ in range(6):
        procs = [subprocess.Popen(cmd, stderr=subprocess.PIPE, text=True) for _ in range(2)]
        results = [(p.wait(), p.communicate()[1]) for p in procs]
        codes = sorted(code for code, _ in results)
        assert codes in ([0, 0], [0, 2]), results  # one after the other, or one refused
        for code, err in results:
            assert "Traceback" not in err
            if code == 2:
                assert "another sitegen build" in err
        with (out / "summary.csv").open(encoding="utf-8") as fh:
            assert len(list(csv.DictReader(fh))) == 4
        assert (out / "index.html").is_file()
    assert not (build_dir_for(out) / ".owner").exists()
    assert not lock_path_for(out).exists()


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
    assert not (build_dir_for(out) / ".owner").exists()


def _children(pid: int) -> set[int]:
    """Processes whose parent is ``pid`` (read from /proc)."""
    out = set()
    for status in Path("/proc").glob("[0-9]*/status"):
        try:
            fields = dict(line.split(":\t", 1) for line in status.read_text().splitlines() if ":\t" in line)
        except OSError:
            continue
        if fields.get("PPid", "").strip() == str(pid):
            out.add(int(status.parent.name))
    return out


def _running(pid: int) -> bool:
    """The process exists and is not a zombie waiting to be reaped."""
    try:
        state = next(ln for ln in Path(f"/proc/{pid}/status").read_text().splitlines() if ln.startswith("State:"))
    except (OSError, StopIteration):
        return False
    return "Z" not in state.split()[1]


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the parent-death signal is Linux's")
def test_workers_end_when_the_build_is_killed_alone(tmp_path: Path) -> None:
    """kill -9 of the build process alone (not its group) ends its worker processes too."""
    data = _dataset_folder(tmp_path, 150)
    cmd = [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(tmp_path / "site"), "-q", "-j", "2"]
    proc = subprocess.Popen(cmd)
    try:
        workers: set[int] = set()
        deadline = time.monotonic() + 20
        while len(workers) < 2 and proc.poll() is None and time.monotonic() < deadline:
            workers |= _children(proc.pid)
            time.sleep(0.01)
        assert len(workers) >= 2, "the build should have started two workers"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
        deadline = time.monotonic() + 10
        while any(_running(w) for w in workers) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not any(_running(w) for w in workers), "workers outlived the killed build"
    finally:
        if proc.poll() is None:
            proc.kill()


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
    root = unpacked / "regression-reports"  # the default title's slug, not the output folder's name
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

    build()  # the watch command builds once before it starts watching
    builds = watch(data, build, interval=0.0, settle=0.0, max_builds=1, clock=lambda: 0.0, sleep=fake_sleep)
    assert builds == 1
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


def test_watch_stops_at_once_on_a_usage_error(tmp_path: Path) -> None:
    res = cli("watch", tmp_path / "missing", "-o", tmp_path / "site")
    assert res.code == 2
    assert "does not exist" in res.stream
    assert "Watching" not in res.stream
    bad = cli("watch", tmp_path, "-o", tmp_path / "site", "--interval", "-1")
    assert bad.code == 2
    assert "seconds above 0" in bad.output


def test_watch_retries_when_another_build_holds_the_folder(tmp_path: Path) -> None:
    from sitegen.watch import RETRY

    data = _dataset_folder(tmp_path, 1)
    calls: list[int] = []

    def build() -> int:
        calls.append(1)
        return RETRY if len(calls) == 1 else 0

    def fake_sleep(_: float) -> None:
        if len(calls) == 0 and not (data / "new.csv").exists():
            (data / "new.csv").write_text("x,y\n1,2\n2,4.1\n3,5.9\n", encoding="utf-8")

    builds = watch(data, build, interval=0.0, settle=0.0, max_builds=2, clock=lambda: 0.0, sleep=fake_sleep)
    assert builds == 2  # the refused build was tried again without any further change
    assert len(calls) == 2


def test_preview_and_pack_refuse_bad_arguments_clearly(tmp_path: Path) -> None:
    data = _dataset_folder(tmp_path, 1)
    out = tmp_path / "site"
    assert cli("build", data, "-o", out, "-j", "1").code == 0
    port = cli("preview", out, "--port", "70000")
    assert port.code == 2
    assert "0 to 65535" in port.output
    inside = cli("pack", out, "-o", out / "inner.html")
    assert inside.code == 2
    assert "inside the site" in inside.stream
    assert not (out / "inner.html").exists()
    for res in (port, inside):
        assert "Traceback" not in res.output
