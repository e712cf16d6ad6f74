"""What importing scipy.special would add to every process that fits a dataset.

Prints the median wall time, over fresh Python processes, of importing ``scipy.special`` after numpy (what
tail probabilities through scipy would cost each fitting process), beside importing sitegen's own
``sitegen.stats.distributions``. Usage: ``python bench/imports.py [--runs N]``.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys

_TIMED = "import time, numpy; t = time.perf_counter(); import {module}; print(time.perf_counter() - t)"


def cost(module: str, runs: int) -> float:
    """Median seconds to import ``module`` in a fresh process that has already imported numpy."""
    times = []
    for _ in range(runs):
        out = subprocess.run(
            [sys.executable, "-c", _TIMED.format(module=module)], capture_output=True, text=True, check=True
        )
        times.append(float(out.stdout.strip()))
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=9)
    args = ap.parse_args()
    figures = {
        "scipy_special_import_ms": round(1000 * cost("scipy.special", args.runs), 1),
        "own_distributions_import_ms": round(1000 * cost("sitegen.stats.distributions", args.runs), 1),
    }
    for k, v in figures.items():
        print(f"{k:32s}{v}")
    print(json.dumps(figures))


if __name__ == "__main__":
    main()
