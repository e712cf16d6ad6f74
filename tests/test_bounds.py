"""Bounded work: every dataset's fit runs under a processor-time and a memory bound (``[limits]``
``max_fit_seconds`` and ``max_fit_megabytes``); a dataset past one gets an ``error`` page naming the
bound while the others build; ``-j`` never starts more workers than there is work for.

The slow and large dataset is a real CSV of 400,000 rows (a few hundred megabytes to fit on the machine
this was written on; the memory bounds below are far from that), or 1,000,000 rows where the time bound is
tested (about 5 s of processor time, against a bound of 2 s), built through the real command line in this
process.
"""

from __future__ import annotations

import io
import os
import time
from pathlib import Path

import numpy as np
import pytest
from test_corpus import build_case, expect, run

from sitegen.cli import main
from sitegen.executor import JOBS_PER_CORE, Bounded, Overrun, WorkerExecutor, default_jobs, make_executor

#: Rows of the dataset that the time bound stops: well over 2 s of processor time to fit.
SLOW_ROWS = 1_000_000


def _large(data: Path, rows: int = 400_000) -> None:
    rng = np.random.default_rng(12)
    x = rng.uniform(0, 100, rows)
    y = 2.5 * x + 1 + rng.normal(0, 1, rows)
    with (data / "large.csv").open("w", encoding="utf-8") as fh:
        fh.write("x,y\n")
        np.savetxt(fh, np.column_stack([x, y]), fmt="%.6f", delimiter=",")


def test_a_fit_past_its_time_bound_gets_an_error_page_and_the_others_build(tmp_path: Path) -> None:
    def prepare(data: Path) -> None:
        _large(data, SLOW_ROWS)
        (data / "site.toml").write_text("[limits]\nmax_fit_seconds = 2\n", encoding="utf-8")

    started = time.monotonic()
    result, site, rows = build_case(tmp_path, prepare)
    assert time.monotonic() - started < 60  # the fit alone would take several seconds of processor time
    expect(result, site, rows, "large", "error", ("large.csv", "stopped after 2 s", "[limits] max_fit_seconds"))
    assert not (site / "datasets" / "large" / "observations.csv").exists()  # nothing half-written is left


def test_a_fit_past_its_memory_bound_gets_an_error_page_and_the_others_build(tmp_path: Path) -> None:
    def prepare(data: Path) -> None:
        _large(data, 1_500_000)  # about 0.4 GB to fit in memory (30 MB, read whole by the threshold below)
        limits = "[limits]\nmax_fit_megabytes = 100\nmax_rows = 2000000\nstream_above_megabytes = 1000\n"
        (data / "site.toml").write_text(limits, encoding="utf-8")

    result, site, rows = build_case(tmp_path, prepare)
    size = (tmp_path / "data" / "large.csv").stat().st_size / 1e6
    says = (
        "large.csv",
        f"a {size:,.1f} MB file",
        "ran out of memory",
        "more than 100 MB",
        "[limits] max_fit_megabytes",
    )
    expect(result, site, rows, "large", "error", says)
    assert "internal error" not in rows["large"]["message"]
    assert "read and fitted in chunks" in rows["large"]["message"]
    assert "[limits] stream_above_megabytes (now 1000 MB)" in rows["large"]["message"]


def test_a_very_high_size_limit_reserves_nothing_up_front(tmp_path: Path) -> None:
    """Reading asks for the file's size, never for the size limit: with a terabyte allowed per file and a
    fit bound of 1,000 MB, a small file still builds (it used to fail when the limit was reserved up front)."""

    def prepare(data: Path) -> None:
        _large(data, 2_000)
        (data / "site.toml").write_text(
            "[limits]\nmax_megabytes = 1000000\nmax_fit_megabytes = 1000\n", encoding="utf-8"
        )

    result, site, rows = build_case(tmp_path, prepare)
    expect(result, site, rows, "large", "ok", ())


def test_a_failure_past_a_bound_is_kept_until_the_bound_changes(tmp_path: Path) -> None:
    """A rebuild does not spend the bound again on the same input; raising the bound fits it again."""
    data = tmp_path / "data"
    data.mkdir()
    _large(data, 300_000)  # far above 20 MB to fit (100,000 rows now fit in about that)
    (data / "site.toml").write_text("[limits]\nmax_fit_megabytes = 20\n", encoding="utf-8")
    site = tmp_path / "site"
    assert run(data, site).code == 1
    again = run(data, site)
    assert again.code == 1
    assert "0 fitted, 1 reused" in again.output
    (data / "site.toml").write_text("[limits]\nmax_fit_megabytes = 2000\n", encoding="utf-8")
    assert run(data, site).code == 0


def test_watch_does_not_wedge_on_a_slow_dataset(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    _large(data, SLOW_ROWS)
    (data / "site.toml").write_text("[limits]\nmax_fit_seconds = 2\n", encoding="utf-8")
    stream = io.StringIO()
    started = time.monotonic()
    code = main(["watch", str(data), "-o", str(tmp_path / "site"), "--max-builds", "0"], stream=stream)
    assert code == 1, stream.getvalue()
    assert time.monotonic() - started < 60
    assert "[limits] max_fit_seconds" in stream.getvalue()


@pytest.mark.parametrize(
    ("key", "value"), [("max_fit_seconds", "0"), ("max_fit_megabytes", '"lots"'), ("max_fit_seconds", "inf")]
)
def test_a_bound_that_is_not_a_positive_number_is_refused(tmp_path: Path, key: str, value: str) -> None:
    data = tmp_path / "data"
    data.mkdir()
    (data / "a.csv").write_text("x,y\n1,2\n2,4.1\n3,5.9\n", encoding="utf-8")
    (data / "site.toml").write_text(f"[limits]\n{key} = {value}\n", encoding="utf-8")
    result = run(data, tmp_path / "site")
    assert result.code == 2
    assert f"[limits] key '{key}' must be a positive number" in result.output or "finite" in result.output


# --- the executor itself ------------------------------------------------------------------------


def _pid(_: int) -> int:
    return os.getpid()


def _spin(seconds: float) -> str:
    end = time.process_time() + seconds
    while time.process_time() < end:
        pass
    return "finished"


def _grab(megabytes: int) -> str:
    block = bytearray(megabytes * 1024 * 1024)
    return f"held {len(block)}"


def _told(item: float, overrun: Overrun) -> str:
    return f"{item}: {overrun}"


def test_jobs_are_capped_at_a_multiple_of_the_cores() -> None:
    assert make_executor(10_000).jobs == JOBS_PER_CORE * default_jobs()
    assert make_executor(1).jobs == 1
    assert make_executor(None).jobs == default_jobs()


def test_no_more_workers_than_items() -> None:
    bounded: Bounded[int, int] = Bounded(30, 500, lambda item, _: -1)
    with WorkerExecutor(8) as run_:
        pids = {pid for _, pid in run_.run(_pid, [1, 2, 3], bounded)}
        assert run_.workers == 3
        assert os.getpid() not in pids  # bounded work never runs in this process, even with few items


def test_a_bounded_item_runs_in_a_worker_even_alone_and_with_one_job() -> None:
    bounded: Bounded[int, int] = Bounded(30, 500, lambda item, _: -1)
    with WorkerExecutor(1) as run_:
        [(_, pid)] = list(run_.run(_pid, [1], bounded))
        assert pid != os.getpid()
        assert run_.workers == 1


def test_items_past_their_bounds_get_the_fallback_and_the_rest_go_on() -> None:
    slow: Bounded[float, str] = Bounded(1, 500, _told)
    with WorkerExecutor(2) as run_:
        got = dict(run_.run(_spin, [0.0, 30.0, 0.1], slow))
        assert got == {0: "finished", 1: "30.0: time", 2: "finished"}
        big: Bounded[int, str] = Bounded(30, 50, _told)
        got2 = dict(run_.run(_grab, [1, 400, 2], big))
        assert got2 == {0: f"held {2**20}", 1: "400: memory", 2: f"held {2 * 2**20}"}
        assert run_.workers == 2  # the workers ended by a bound were replaced


def test_items_sent_ahead_to_a_worker_that_goes_past_a_bound_run_elsewhere() -> None:
    """With several workers each gets its next item ahead (in its pipe, behind the one it runs): an item queued
    behind one that is stopped by a bound is not lost with that worker but runs in another."""
    slow: Bounded[float, str] = Bounded(1, 500, _told)
    with WorkerExecutor(2) as run_:
        # Worker 1 runs item 1 (past the time bound) with item 3 sent ahead behind it.
        got = dict(run_.run(_spin, [0.0, 30.0, 0.1, 0.2], slow))
        assert got == {0: "finished", 1: "30.0: time", 2: "finished", 3: "finished"}
        big: Bounded[int, str] = Bounded(30, 50, _told)
        got2 = dict(run_.run(_grab, [1, 400, 2, 3], big))
        assert got2 == {0: f"held {2**20}", 1: "400: memory", 2: f"held {2 * 2**20}", 3: f"held {3 * 2**20}"}
        assert run_.workers == 2
