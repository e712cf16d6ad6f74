"""No-op rebuilds of the example project (``sitegen build example_project -o SITE`` once more with nothing
changed) by the working tree and, for comparison, by earlier revisions, interleaved, to tell a cost from noise.

Usage: ``python bench/noop.py [REV ...] [--runs N] [--datasets N]``. Each REV (e.g. the commit before a change) is checked out
into a temporary worktree and run with this environment's libraries (``PYTHONPATH`` first); each version builds
its own copy of its own ``example_project`` (or, with ``--datasets N``, of a generated folder of N datasets of
30 rows, bench/datasets.py) twice (a site, then a rebuild with nothing to do) and is then timed
over N more rebuilds, the versions taking turns so that a change in the machine's load falls on all alike.
Prints, per version, the wall time (best, mean of the fastest fifth, median) and the processor time of the
whole process (user + system; best and fastest fifth), which the machine's load disturbs less.

Every version's modules are byte-compiled first: a checkout run with ``PYTHONDONTWRITEBYTECODE`` set (as the
Makefile's environment is) compiles each module whose ``.pyc`` is older than its source again on every run,
which costs a no-op rebuild about 15 ms for ``spec.py`` alone (``make pyc`` after a merge, before measuring).
"""

from __future__ import annotations

import argparse
import compileall
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))

from datasets import make_folder  # type: ignore[import-not-found]  # noqa: E402


def _once(code: Path, data: Path, site: Path) -> tuple[float, float]:
    """Wall and processor seconds of one build of ``data`` into ``site`` by the code under ``code``."""
    env = {**os.environ, "PYTHONPATH": str(code), "PYTHONDONTWRITEBYTECODE": "1"}
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run(
        [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(site), "-q"],
        env=env,
        check=False,  # an older revision may refuse a dataset of its own example: the rebuild is timed all the same
        capture_output=True,
        cwd=site.parent,  # not the repository: the current folder comes first on the import path
    )
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def _summary(values: list[float]) -> tuple[float, float, float]:
    """Best, mean of the fastest fifth and median, in milliseconds."""
    ordered = sorted(values)
    fifth = ordered[: max(1, len(ordered) // 5)]
    return 1e3 * ordered[0], 1e3 * sum(fifth) / len(fifth), 1e3 * ordered[len(ordered) // 2]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("revs", nargs="*", help="earlier revisions to compare with the working tree")
    parser.add_argument("--runs", type=int, default=30, help="timed rebuilds per version (default 30)")
    parser.add_argument(
        "--datasets", type=int, default=0, help="a generated folder of N datasets instead of the example"
    )
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="sitegen-noop-") as tmp:
        work = Path(tmp)
        versions: dict[str, Path] = {}
        for i, rev in enumerate(args.revs):
            tree = work / f"rev-{i}"
            git = ["git", "-C", str(ROOT), "worktree", "add", "--detach", str(tree), rev]
            subprocess.run(git, check=True, capture_output=True)
            versions[rev] = tree
        versions["working tree"] = ROOT
        try:
            setups = {}
            for i, (name, tree) in enumerate(versions.items()):
                compileall.compile_dir(tree / "sitegen", quiet=1)
                place = work / f"v{i}"
                data, site = place / "data", place / "site"
                if args.datasets:
                    make_folder(data, count=args.datasets, rows=30)
                else:
                    shutil.copytree(tree / "example_project", data)
                for _ in range(2):  # the site, then its first rebuild: the state every timed run starts from
                    _once(tree, data, site)
                setups[name] = (tree, data, site)
            walls: dict[str, list[float]] = {name: [] for name in versions}
            cpus: dict[str, list[float]] = {name: [] for name in versions}
            for _ in range(args.runs):
                for name, (tree, data, site) in setups.items():
                    wall, cpu = _once(tree, data, site)
                    walls[name].append(wall)
                    cpus[name].append(cpu)
            what = f"a folder of {args.datasets} datasets" if args.datasets else "example_project"
            print(f"no-op rebuild of {what}, {args.runs} interleaved runs each")
            for name in versions:
                wb, wf, wm = _summary(walls[name])
                cb, cf, _ = _summary(cpus[name])
                print(
                    f"{name:>14}: wall best {wb:.1f} ms, fastest fifth {wf:.1f} ms, median {wm:.1f} ms; "
                    f"processor best {cb:.1f} ms, fastest fifth {cf:.1f} ms"
                )
        finally:
            for tree in versions.values():
                if tree != ROOT:
                    subprocess.run(["git", "-C", str(ROOT), "worktree", "remove", "--force", str(tree)], check=False)


if __name__ == "__main__":
    main()
