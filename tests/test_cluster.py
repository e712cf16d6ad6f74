"""Building on a real Dask cluster (``--cluster``), and transient failures (read errors, lost workers).

The cluster is real: a ``dask scheduler`` and two ``dask worker`` processes (each under its nanny, as they are
usually started) run as subprocesses whose working folder and ``--local-directory`` are folders of their own,
not the test's, so a path that only makes sense in the test's working folder would fail there. The build under
test runs in this process through the real CLI.

The start check is tested with a third worker that truly cannot see the data folder: it is started in a mount
namespace of its own (``unshare --mount``) where an empty tmpfs is mounted over the folder that holds the data,
as a machine without the share would see it. Where this machine allows no mount namespaces, that one test is
skipped with a message.

The local tests below drive the build through an executor passed in (the build's seam), which changes what
one work item reads: the way a worker that cannot read a file sees it.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import pytest
from conftest import LINE_CSV, cli, copy_example, write_csv, write_toml
from test_bounds import _large

from sitegen.build import TRANSIENT_TRIES, BuildOptions, run_build

# --- transient failures, through the build's executor seam (no cluster needed) ----------------------------


class _Unreadable:
    """Runs items in this process; the fit of ``slug`` is given a path (its CSV's, or with ``which`` its
    sidecar's) that does not exist for its first ``times`` tries (as a worker that cannot read the file sees
    it); the file itself is never touched."""

    def __init__(self, slug: str, times: int, which: str = "csv_path") -> None:
        self.slug, self.times, self.tries, self.which = slug, times, 0, which

    def run(self, fn: Callable[[Any], Any], items: list[Any], bounded: Any = None) -> Any:
        def one(item: Any) -> Any:
            src = getattr(item, "source", None)
            if src is None or src.slug != self.slug:
                return fn(item)
            self.tries += 1
            if self.tries <= self.times:
                gone = getattr(src, self.which).with_name("not-here")
                item = replace(item, source=replace(src, **{self.which: gone}))
            return fn(item)

        return ((i, one(item)) for i, item in enumerate(items))

    def __enter__(self) -> _Unreadable:
        return self

    def __exit__(self, *exc: object) -> None:
        return None


def _line_folder(tmp_path: Path) -> tuple[Path, Path]:
    data = tmp_path / "data"
    write_csv(data / "alpha.csv", LINE_CSV)
    write_csv(data / "beta.csv", "dose,response\n0,0.12\n1,0.52\n2,0.87\n3,1.33\n4,1.71\n5,2.08\n")
    return data, tmp_path / "site"


def _entries(site: Path) -> dict[str, dict[str, Any]]:
    body = json.loads((site / "build.json").read_text(encoding="utf-8"))
    return {e["dataset"]: e for e in body["datasets"]}


def test_a_read_error_is_tried_again_in_the_same_build(tmp_path: Path) -> None:
    data, site = _line_folder(tmp_path)
    seam = _Unreadable("beta", times=1)
    summary = run_build(BuildOptions(data, site, jobs=1), executor=seam)
    assert seam.tries == 2
    assert {o.dataset: o.status for o in summary.outcomes}["beta"] == "ok"


@pytest.mark.parametrize("which", ["csv_path", "sidecar_path"])
def test_a_read_error_that_persists_fails_the_dataset_but_is_never_kept(tmp_path: Path, which: str) -> None:
    data, site = _line_folder(tmp_path)
    write_toml(data / "beta.toml", {"title": "Beta"})
    seam = _Unreadable("beta", times=TRANSIENT_TRIES, which=which)
    summary = run_build(BuildOptions(data, site, jobs=1), executor=seam)
    assert seam.tries == TRANSIENT_TRIES
    outcome = {o.dataset: o for o in summary.outcomes}["beta"]
    assert outcome.status == "error"
    assert "cannot be read" in outcome.message
    assert _entries(site)["beta"]["failure_kept"] is False
    # Nothing changed in the folder: the next build still fits beta (a kept failure would be reused).
    again = run_build(BuildOptions(data, site, jobs=1))
    assert {o.dataset: o.status for o in again.outcomes}["beta"] == "ok"
    assert _entries(site)["beta"]["reused"] is False
    assert _entries(site)["alpha"]["reused"] is True


# --- a real cluster -------------------------------------------------------------------------------------

distributed = pytest.importorskip("distributed", reason="the optional 'distributed' library is not installed")


@dataclass
class _Cluster:
    address: str
    base: Path
    scheduler_file: Path
    client: Any
    procs: list[subprocess.Popen[bytes]]

    def worker(self, name: str, prefix: tuple[str, ...] = ()) -> subprocess.Popen[bytes]:
        """Start a ``dask worker`` (under its nanny) in a folder of its own."""
        home = self.base / name
        home.mkdir(exist_ok=True)
        cmd = [
            sys.executable,
            "-m",
            "dask",
            "worker",
            "--scheduler-file",
            str(self.scheduler_file),
            "--name",
            name,
            "--nthreads",
            "1",
            "--no-dashboard",
            "--local-directory",
            str(home),
        ]
        with (self.base / f"{name}.log").open("wb") as log:
            proc = subprocess.Popen(
                [*prefix, *cmd], cwd=home, stdout=log, stderr=subprocess.STDOUT, start_new_session=True
            )
        self.procs.append(proc)
        return proc

    def workers(self) -> dict[str, str]:
        """Name → address of the workers the scheduler knows."""
        info = self.client.scheduler_info(n_workers=-1)
        return {w["name"]: address for address, w in info["workers"].items()}


def _stop(proc: subprocess.Popen[bytes]) -> None:
    with contextlib.suppress(ProcessLookupError):
        os.killpg(proc.pid, signal.SIGTERM)
    try:
        proc.wait(timeout=15)
    except subprocess.TimeoutExpired:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()


def _wait_for(what: Callable[[], bool], seconds: float, why: str) -> None:
    end = time.monotonic() + seconds
    while not what():
        if time.monotonic() > end:
            raise AssertionError(f"waited {seconds:g} s: {why}")
        time.sleep(0.2)


@pytest.fixture(scope="module")
def cluster(tmp_path_factory: pytest.TempPathFactory) -> Iterator[_Cluster]:
    base = tmp_path_factory.mktemp("dask")
    scheduler_file = base / "scheduler.json"
    cmd = [sys.executable, "-m", "dask", "scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard"]
    with (base / "scheduler.log").open("wb") as log:
        scheduler = subprocess.Popen(
            [*cmd, "--scheduler-file", str(scheduler_file)],
            cwd=base,
            stdout=log,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
    procs = [scheduler]
    client = None
    try:
        _wait_for(scheduler_file.exists, 60, "the scheduler did not start")
        _wait_for(lambda: bool(scheduler_file.read_text(encoding="utf-8").strip()), 10, "no scheduler file")
        address = json.loads(scheduler_file.read_text(encoding="utf-8"))["address"]
        client = distributed.Client(address, set_as_default=False, timeout=30)
        found = _Cluster(address, base, scheduler_file, client, procs)
        found.worker("one")
        found.worker("two")
        client.wait_for_workers(2, timeout=90)
        yield found
    finally:
        if client is not None:
            client.close()
        for proc in reversed(procs):
            _stop(proc)


def _fits(site: Path) -> dict[str, Any]:
    return {
        p.parent.name: json.loads(p.read_text(encoding="utf-8")) for p in sorted((site / "datasets").glob("*/fit.json"))
    }


def _files(site: Path) -> dict[str, bytes]:
    """Every file of a site but the two that carry the build's time."""
    skip = {"build.json", "assets/built.js"}
    return {
        p.relative_to(site).as_posix(): p.read_bytes()
        for p in sorted(site.rglob("*"))
        if p.is_file() and p.relative_to(site).as_posix() not in skip
    }


def _whole(site: Path) -> None:
    """Every file build.json lists is there at its recorded size, and nothing else is."""
    body = json.loads((site / "build.json").read_text(encoding="utf-8"))
    listed = body["files"]
    present = {p.relative_to(site).as_posix() for p in site.rglob("*") if p.is_file()} - {"build.json", ".sitegen"}
    assert present == set(listed)
    for name, stat in listed.items():
        size = stat[0] if isinstance(stat, list) else stat
        assert (site / name).stat().st_size == size, name


def test_a_cluster_build_equals_the_local_build(
    cluster: _Cluster, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    data = copy_example(tmp_path / "data")
    local = cli("build", data, "-o", tmp_path / "local", "-j", "2")
    monkeypatch.chdir(tmp_path)  # relative paths here: the workers' working folders are elsewhere
    on_cluster = cli("build", "data", "-o", "site", "--cluster", cluster.address)
    assert on_cluster.code == local.code, on_cluster.output
    assert "0 failed" in on_cluster.stream
    fits = _fits(tmp_path / "site")
    assert len(fits) == len(_entries(tmp_path / "local")) >= 10
    assert fits == _fits(tmp_path / "local")  # every figure of every fit.json
    assert _files(tmp_path / "site") == _files(tmp_path / "local")  # and every other file of the site
    assert all(not e["reused"] for e in _entries(tmp_path / "site").values())
    _whole(tmp_path / "site")


def test_a_worker_that_cannot_see_the_data_folder_stops_the_build_before_any_dataset(
    cluster: _Cluster, tmp_path: Path
) -> None:
    if shutil.which("unshare") is None or shutil.which("mount") is None:
        pytest.skip("unshare/mount are not installed: no way to start a worker that cannot see a folder")
    share = tmp_path / "share"  # what the blind worker's machine does not have mounted
    data = copy_example(share / "data")
    site = tmp_path / "site"
    hide = f'mount -t tmpfs sitegen-test {share} && exec "$@"'
    blind = cluster.worker("blind", prefix=("unshare", "--mount", "--map-root-user", "sh", "-c", hide, "sh"))
    try:
        try:
            _wait_for(lambda: "blind" in cluster.workers() or blind.poll() is not None, 90, "no blind worker")
        except AssertionError:
            pytest.fail("the worker in a mount namespace did not join the cluster")
        if blind.poll() is not None:
            pytest.skip("this machine allows no mount namespace (unshare --mount failed)")
        blind_address = cluster.workers()["blind"]
        result = cli("build", data, "-o", site, "--cluster", cluster.address)
        assert result.code == 2, result.output
        assert f"worker {blind_address} cannot see (or read) the data folder {data}" in result.stream
        assert "same absolute paths" in result.stream
        assert result.stream.count("cannot see") == 1  # the two other workers see it
        assert "error:" in result.stream
        assert "failed" not in result.stream
        assert not site.exists()
    finally:
        _stop(blind)
        _wait_for(lambda: "blind" not in cluster.workers(), 30, "the blind worker did not leave")


def test_a_fit_past_its_memory_bound_on_a_worker_gets_its_error_page_and_the_worker_goes_on(
    cluster: _Cluster, tmp_path: Path
) -> None:
    data = tmp_path / "data"
    data.mkdir()
    _large(data, 100_000)  # needs far more than 20 MB to fit
    write_csv(data / "small.csv", LINE_CSV)
    (data / "site.toml").write_text("[limits]\nmax_fit_megabytes = 20\n", encoding="utf-8")
    result = cli("build", data, "-o", tmp_path / "site", "--cluster", cluster.address)
    assert result.code == 1, result.output
    entries = _entries(tmp_path / "site")
    assert entries["small"]["status"] == "ok"
    assert entries["large"]["status"] == "error"
    assert "more than 20 MB" in entries["large"]["message"]
    assert "[limits] max_fit_megabytes" in entries["large"]["message"]
    assert entries["large"]["failure_kept"] is True  # a bound's verdict is the input's, as on one machine
    assert set(cluster.workers()) == {"one", "two"}  # the bound ended a child of the worker, not the worker


def test_kill_9_of_a_worker_mid_build_leaves_the_published_site_whole(cluster: _Cluster, tmp_path: Path) -> None:
    """A worker killed while it fits: Dask gives its work to the other worker; the site published is whole
    and equals a local build, and no dataset's failure is recorded."""
    data = copy_example(tmp_path / "data")
    site, local = tmp_path / "site", tmp_path / "local"
    assert cli("build", data, "-o", local, "-j", "2").code == 0
    assert cli("build", data, "-o", site, "-j", "2").code == 0
    before = _fits(site)
    killed: list[int] = []

    def kill_one(done: int, total: int, name: str) -> None:
        del total, name
        if done < 1 or killed:
            return
        busy = [address for address, keys in cluster.client.processing().items() if keys]
        pids: dict[str, int] = cluster.client.run(os.getpid, workers=busy or None)
        _address, pid = sorted(pids.items())[0]
        os.kill(pid, signal.SIGKILL)
        killed.append(pid)

    summary = run_build(BuildOptions(data, site, refit=True, cluster=cluster.address), progress=kill_one)
    assert killed, "no worker was killed"
    assert all(o.status != "error" for o in summary.outcomes)
    entries = _entries(site)
    assert all(not e["reused"] and not e["failure_kept"] for e in entries.values())
    _whole(site)
    assert _fits(site) == _fits(local) == before
    # The nanny starts a new worker in the killed one's place.
    _wait_for(lambda: len(cluster.workers()) == 2, 60, "the killed worker was not replaced")
