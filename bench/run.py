"""Benchmark: sitegen against the straightforward sequential script, side by side.

Prints full build, no-op rebuild, one-changed rebuild, per-dataset cost, peak
memory and site size for both. Usage: ``python bench/run.py [--datasets N] [--rows R]``.
Goals (issue 4): full build ≤ 0.10 of the baseline; no-op ≤ 5 % of full; one changed ≤ 10 % of full.
Rebuilds are timed as separate ``sitegen build`` runs and, beside them, inside one long-running
process as ``sitegen watch`` runs them (no Python start-up or imports per rebuild).
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from datasets import make_folder, touch_one  # type: ignore[import-not-found]  # noqa: E402

_PEAK = (
    "import resource,subprocess,sys,time;t=time.perf_counter();r=subprocess.run(sys.argv[1:]);"
    "s=time.perf_counter()-t;"
    "m=max(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss,0);"
    "print('%BENCH%',s,m,r.returncode)"
)


def timed(cmd: list[str], repeat: int = 1, before: Callable[[], object] | None = None) -> tuple[float, float, int]:
    """Median seconds over ``repeat`` runs, peak RSS (MB) of the largest process, last exit status."""
    runs = []
    for _ in range(repeat):
        if before is not None:
            before()
        runs.append(_timed_once(cmd))
    seconds = sorted(r[0] for r in runs)[len(runs) // 2]
    return seconds, max(r[1] for r in runs), runs[-1][2]


def timed_each(make_cmd: Callable[[], list[str]], repeat: int) -> tuple[float, float, int]:
    """Like :func:`timed`, with a new command (e.g. a new output folder) for every run."""
    runs = [_timed_once(make_cmd()) for _ in range(repeat)]
    seconds = sorted(r[0] for r in runs)[len(runs) // 2]
    return seconds, max(r[1] for r in runs), runs[-1][2]


def _timed_once(cmd: list[str]) -> tuple[float, float, int]:
    out = subprocess.run([sys.executable, "-c", _PEAK, *cmd], capture_output=True, text=True, check=False)
    line = next(ln for ln in out.stdout.splitlines() if ln.startswith("%BENCH%"))
    _, s, m, rc = line.split()
    return float(s), int(m) / 1024, int(rc)


_IN_PROCESS = """
import json, statistics, sys, time
from pathlib import Path
sys.path.insert(0, sys.argv[3])
from datasets import touch_one
from sitegen.build import BuildOptions, run_build
options = BuildOptions(Path(sys.argv[1]), Path(sys.argv[2]))
run_build(options)  # warm: imports done, as in a watch that has built once
one, noop = [], []
for _ in range(int(sys.argv[4])):
    touch_one(options.data_dir)
    t = time.perf_counter(); run_build(options); one.append(time.perf_counter() - t)
    t = time.perf_counter(); run_build(options); noop.append(time.perf_counter() - t)
print(json.dumps([statistics.median(one), statistics.median(noop)]))
"""


def in_process(data: Path, site: Path, repeat: int) -> tuple[float, float]:
    """Median one-changed and no-op rebuild inside one long-running process (as ``sitegen watch`` runs them)."""
    out = subprocess.run(
        [sys.executable, "-c", _IN_PROCESS, str(data), str(site), str(HERE), str(repeat)],
        capture_output=True,
        text=True,
        check=True,
    )
    one, noop = json.loads(out.stdout.strip().splitlines()[-1])
    return float(one), float(noop)


def file_creation_ms(folder: Path, count: int = 300) -> float:
    """Milliseconds to create one small file in ``folder`` (the file system's share of a build)."""
    probe = folder / "creation-probe"
    probe.mkdir()
    start = time.perf_counter()
    for i in range(count):
        (probe / f"f{i}").write_bytes(b"x" * 1000)
    elapsed = time.perf_counter() - start
    shutil.rmtree(probe)
    return 1000 * elapsed / count


def size_mb(folder: Path) -> float:
    return sum(p.stat().st_size for p in folder.rglob("*") if p.is_file()) / 1e6


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--datasets", type=int, default=200)
    ap.add_argument("--rows", type=int, default=200)
    ap.add_argument("--skip-baseline", action="store_true")
    ap.add_argument("--repeat", type=int, default=3, help="runs per figure; the median is reported")
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="sitegen-bench-"))
    try:
        data = make_folder(tmp / "data", args.datasets, args.rows)
        site = tmp / "site"
        sitegen = [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(site), "-q"]
        # Warm the chart-bundle cache so the full build measures steady-state work.
        timed([sys.executable, "-m", "sitegen", "build", str(data), "-o", str(tmp / "warm"), "-q"])
        # A rebuild's steady state: the site and its spare (the site before it) exist.
        timed(sitegen)
        timed([*sitegen, "--refit"])
        full, full_mem, _ = timed([*sitegen, "--refit"], args.repeat)
        fresh_sites = iter(tmp / f"fresh-{i}" for i in range(args.repeat))
        fresh, _, _ = timed_each(lambda: [*sitegen[:-3], "-o", str(next(fresh_sites)), "-q"], args.repeat)
        noop, noop_mem, _ = timed(sitegen, args.repeat)
        one, one_mem, _ = timed(sitegen, args.repeat, before=lambda: touch_one(data))
        watch_one, watch_noop = in_process(data, site, max(3, args.repeat))
        results = {
            "folder": str(tmp.parent),
            "file_creation_ms": round(file_creation_ms(tmp), 3),
            "datasets": args.datasets,
            "rows": args.rows,
            "sitegen_full_s": round(full, 2),  # --refit over the previous site (and its spare)
            "sitegen_fresh_s": round(fresh, 2),  # into an empty folder
            "sitegen_noop_s": round(noop, 2),
            "sitegen_one_changed_s": round(one, 2),
            "sitegen_per_dataset_ms": round(1000 * full / args.datasets, 1),
            "sitegen_peak_mb": round(max(full_mem, noop_mem, one_mem), 1),
            "sitegen_site_mb": round(size_mb(site), 1),
            "noop_fraction_of_full": round(noop / full, 3),
            "one_changed_fraction_of_full": round(one / full, 3),
            # inside a long-running process (sitegen watch): no start-up or imports per rebuild
            "watch_one_changed_s": round(watch_one, 3),
            "watch_noop_s": round(watch_noop, 3),
            "watch_one_changed_fraction_of_full": round(watch_one / full, 3),
        }
        if not args.skip_baseline:
            base_out = tmp / "baseline"
            base, base_mem, _ = timed(
                [sys.executable, str(HERE / "baseline.py"), str(data), str(base_out)], args.repeat
            )
            results |= {
                "baseline_full_s": round(base, 2),
                "baseline_per_dataset_ms": round(1000 * base / args.datasets, 1),
                "baseline_peak_mb": round(base_mem, 1),
                "baseline_site_mb": round(size_mb(base_out), 1),
                "full_fraction_of_baseline": round(full / base, 3),
            }
        width = max(len(k) for k in results)
        for k, v in results.items():
            print(f"{k:<{width}}  {v}")
        print(json.dumps(results))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
