"""The benchmark script runs end to end on a tiny folder and prints every figure it promises.

Speed goals live in the benchmark's printout, not in tests; this only keeps the script working.
"""

from __future__ import annotations

import json
import subprocess
import sys

from conftest import ROOT


def test_bench_runs_on_a_tiny_folder() -> None:
    out = subprocess.run(
        [sys.executable, str(ROOT / "bench" / "run.py"), "--datasets", "4", "--rows", "30", "--repeat", "1"],
        capture_output=True, text=True, cwd=ROOT, check=True, timeout=600,
    )  # fmt: skip
    figures = json.loads(out.stdout.strip().splitlines()[-1])
    for key in (
        "sitegen_full_s", "sitegen_fresh_s", "sitegen_noop_s", "sitegen_one_changed_s", "sitegen_per_dataset_ms",
        "sitegen_peak_mb", "sitegen_site_mb", "baseline_full_s", "baseline_peak_mb", "baseline_site_mb",
        "full_fraction_of_baseline", "noop_fraction_of_full", "one_changed_fraction_of_full", "file_creation_ms",
        "watch_one_changed_s", "watch_noop_s", "watch_one_changed_fraction_of_full",
    ):  # fmt: skip
        assert isinstance(figures[key], int | float), key
        assert figures[key] >= 0, key
    assert figures["datasets"] == 4


def test_large_bench_runs_on_a_small_file() -> None:
    out = subprocess.run(
        [sys.executable, str(ROOT / "bench" / "large.py"), "--rows", "3000"],
        capture_output=True, text=True, cwd=ROOT, check=True, timeout=600,
    )  # fmt: skip
    lines = out.stdout.strip().splitlines()
    assert "interpreter_peak_mb" in json.loads(lines[0])
    head, row = lines[-2].split(" | "), lines[-1].split(" | ")
    figures = dict(zip(head, row, strict=True))
    assert int(figures["rows"]) == 3000
    for key in ("floor_s", "sitegen_s", "ratio", "floor_peak_mb", "sitegen_peak_mb"):
        assert float(figures[key]) > 0, key
