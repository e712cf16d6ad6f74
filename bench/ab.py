"""Full builds of one folder by two versions of sitegen, interleaved, to tell a cost from noise.

Usage: ``python bench/ab.py REV [--datasets N] [--rounds R]``. REV is a git revision (e.g. the commit
before a change); it is checked out into a temporary worktree and run with this environment's
libraries (``PYTHONPATH`` first), beside the working tree's own code. Each round builds the same
benchmark folder (bench/datasets.py) from scratch with both, in alternating order, so that a change in
the machine's load falls on both alike. Prints each version's median and spread of the wall time and
the CPU time of the whole build (less sensitive to the machine's load than the wall time), and the analysis CPU per dataset (every dataset fitted again in one process, best of three).
"""

from __future__ import annotations

import argparse
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))

from datasets import make_folder  # type: ignore[import-not-found]  # noqa: E402

_ANALYSIS = """
import sys, time
from pathlib import Path
import sitegen
from sitegen.analyze import FitTask, analyze
from sitegen.discover import discover
from sitegen.spec import Limits
sources = discover(Path(sys.argv[1]))
analyze(FitTask(sources[0], (), Limits()))
runs = []
for _ in range(3):
    start = time.process_time()
    for source in sources:
        analyze(FitTask(source, (), Limits()))
    runs.append(time.process_time() - start)
print(sitegen.__file__)
print(1e3 * min(runs) / len(sources))
"""


def _build(code: str, data: Path, out: Path, cache: Path) -> tuple[float, float]:
    """Wall seconds and CPU seconds (user + system of the build and its workers) of one full build."""
    env = {"PYTHONPATH": code, "XDG_CACHE_HOME": str(cache), "PATH": "/usr/bin:/bin"}
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run(
        [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(out)],
        env=env,
        check=True,
        capture_output=True,
        cwd=out.parent,  # not the repository: the current folder comes first on the import path
    )
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def _analysis_ms(code: str, data: Path, cache: Path) -> float:
    env = {"PYTHONPATH": code, "XDG_CACHE_HOME": str(cache), "PATH": "/usr/bin:/bin"}
    out = subprocess.run(
        [sys.executable, "-c", _ANALYSIS, str(data)],
        env=env,
        check=True,
        capture_output=True,
        text=True,
        cwd=data.parent,
    )
    where, ms = out.stdout.strip().splitlines()[-2:]
    if not where.startswith(code):
        raise SystemExit(f"ran {where}, not the code under {code}")
    return float(ms)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("rev")
    parser.add_argument("--datasets", type=int, default=200)
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="sitegen-ab-") as tmp:
        work = Path(tmp)
        old = work / "old"
        subprocess.run(
            ["git", "-C", str(ROOT), "worktree", "add", "--detach", str(old), args.rev], check=True, capture_output=True
        )
        try:
            data = make_folder(work / "data", count=args.datasets)
            versions = {f"{args.rev} (before)": str(old), "working tree (after)": str(ROOT)}
            times: dict[str, list[float]] = {name: [] for name in versions}
            cpu: dict[str, list[float]] = {name: [] for name in versions}
            for r in range(args.rounds):
                order = list(versions) if r % 2 == 0 else list(reversed(versions))
                for name in order:
                    cache = work / f"cache-{name[:3]}"
                    wall, used = _build(versions[name], data, work / f"site-{r}-{name[:3]}", cache)
                    times[name].append(wall)
                    cpu[name].append(used)
            print(f"{args.datasets} datasets, {args.rounds} interleaved full builds each")
            for name, code in versions.items():
                t = times[name]
                ms = _analysis_ms(code, data, work / f"cache-{name[:3]}")
                print(
                    f"{name:>28}: full build median {statistics.median(t):.2f} s "
                    f"(min {min(t):.2f}, max {max(t):.2f}); CPU median {statistics.median(cpu[name]):.2f} s "
                    f"(min {min(cpu[name]):.2f}); analysis CPU {ms:.1f} ms per dataset"
                )
        finally:
            subprocess.run(["git", "-C", str(ROOT), "worktree", "remove", "--force", str(old)], check=False)


if __name__ == "__main__":
    main()
