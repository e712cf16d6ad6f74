"""Generate the benchmark folder: many invented straight-line datasets."""

from __future__ import annotations

from pathlib import Path

import numpy as np


def make_folder(root: Path, count: int = 200, rows: int = 200, seed: int = 7) -> Path:
    """Write ``count`` datasets of ``rows`` rows (CSV + sidecar) under ``root`` in two sub-folders."""
    rng = np.random.default_rng(seed)
    for i in range(count):
        folder = root / ("bench-a" if i % 2 else "bench-b")
        folder.mkdir(parents=True, exist_ok=True)
        x = np.sort(rng.uniform(0, 50, rows))
        y = 1.5 + (0.8 + 0.01 * i) * x + rng.normal(0, 1.0 + 0.02 * x, rows)
        lines = ["x,y", *(f"{a:.4f},{b:.4f}" for a, b in zip(x, y, strict=True))]
        (folder / f"set_{i:03d}.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
        (folder / f"set_{i:03d}.toml").write_text(
            f'title = "Bench dataset {i}"\nmodel = "y ~ x"\ntags = ["bench"]\n', encoding="utf-8"
        )
    return root


def touch_one(root: Path) -> None:
    """Change one dataset's data (append a row)."""
    path = next(iter(sorted(root.rglob("set_*.csv"))))
    with path.open("a", encoding="utf-8") as fh:
        fh.write("25.0,22.5\n")
