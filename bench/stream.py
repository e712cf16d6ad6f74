"""Benchmark: files read and fitted in chunks (sitegen/stream), time and peak memory, and agreement with the
whole-file fit.

For each size a ``y ~ x`` CSV is made on the fly in a temporary folder and deleted afterwards (100 M rows take
about 3.7 GB of disk and their observations.csv some 23 GB; the free space is checked first) and built with
``[limits] stream_above_megabytes = 0`` (every file read in chunks) and limits raised to fit the file. Prints,
per size, the seconds by the clock, the peak memory of the build (its largest process, ``ru_maxrss``), and
with ``--compare`` also the whole-file build's and the fewest significant digits on which the two agree over
every number of ``fit.json`` and every cell of ``observations.csv`` (per-row cells relative to the largest
magnitude in their column).

Usage: ``python bench/stream.py [--rows 1000000 10000000 100000000] [--compare] [--chunk-rows 250000]``.
Goal (issue 18): 100 M rows within 2 GB peak memory; agreement ≥ 12 digits at 1 M rows.
"""

from __future__ import annotations

import argparse
import json
import math
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

_PEAK = (
    "import resource,subprocess,sys;r=subprocess.run(sys.argv[1:]);"
    "print('%BENCH%',resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss,r.returncode)"
)
_BYTES_PER_ROW = 37  # of the CSV written here
_OBSERVATION_BYTES_PER_ROW = 230  # of observations.csv (14 columns of full-precision numbers)
_WHOLE_MAX_ROWS = 20_000_000  # --compare builds files up to this size whole too (about 300 bytes a row to fit)


def make_csv(path: Path, rows: int, seed: int = 18) -> None:
    """A ``y ~ x`` CSV of ``rows`` rows with full-precision numbers, written a million rows at a time."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    rng = np.random.default_rng(seed)
    options = pacsv.WriteOptions(include_header=False, quoting_style="none")
    with path.open("wb") as fh:
        fh.write(b"x,y\n")
        for start in range(0, rows, 1_000_000):
            m = min(1_000_000, rows - start)
            x = rng.uniform(0.0, 100.0, m)
            y = 2.0 + 0.5 * x + rng.normal(0.0, 1.0, m)
            pacsv.write_csv(pa.table({"x": x, "y": y}), fh, write_options=options)


def build(data: Path, out: Path) -> tuple[float, float, int]:
    """(seconds by the clock, peak MB of the build's largest process, exit status)."""
    sitegen = Path(sys.executable).with_name("sitegen")
    start = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-c", _PEAK, str(sitegen), "build", str(data), "-o", str(out), "-j", "1", "-q"],
        capture_output=True,
        text=True,
        check=False,
    )
    seconds = time.perf_counter() - start
    line = next((ln for ln in done.stdout.splitlines() if ln.startswith("%BENCH%")), None)
    if line is None:
        raise SystemExit(f"the build printed no figures: {done.stderr[-2000:]}")
    _, peak_kb, code = line.split()
    return seconds, int(peak_kb) / 1024, int(code)


def _digits(a: float, b: float, scale: float | None = None) -> float:
    if a == b or (math.isnan(a) and math.isnan(b)):
        return math.inf
    if not (math.isfinite(a) and math.isfinite(b)):
        return 0.0
    ref = scale if scale else max(abs(a), abs(b))
    return -math.log10(abs(a - b) / ref) if ref else math.inf


def _fit_digits(a: Any, b: Any, path: str = "") -> tuple[float, str]:
    """Fewest agreeing digits over the numbers of two fit.json trees (the chunked fit's own fields aside)."""
    worst, where = math.inf, ""
    if isinstance(a, dict):
        items = [(k, a[k], b.get(k)) for k in a if k not in ("chunked", "basis", "messages", "text")]
    elif isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        items = [(str(i), u, v) for i, (u, v) in enumerate(zip(a, b, strict=True))]
    elif isinstance(a, float) and isinstance(b, int | float):
        return _digits(a, float(b)), path
    else:
        return math.inf, ""
    for key, u, v in items:
        d, w = _fit_digits(u, v, f"{path}.{key}")
        if d < worst:
            worst, where = d, w
    return worst, where


def compare(site_a: Path, site_b: Path) -> tuple[float, str, float, str]:
    """(fit.json digits, where; observations.csv digits, column) between two builds of ``log``."""
    import pandas as pd

    folder_a, folder_b = site_a / "datasets" / "log", site_b / "datasets" / "log"
    fit_a = json.loads((folder_a / "fit.json").read_text(encoding="utf-8"))
    fit_b = json.loads((folder_b / "fit.json").read_text(encoding="utf-8"))
    # Breusch–Pagan's LM and RESET's F (checks 0 and 3) are small differences of large sums, which the whole-file
    # path loses digits on (README): reported apart from the other figures.
    differences = [fit_a["diagnostics"].pop(i) for i in (3, 0)], [fit_b["diagnostics"].pop(i) for i in (3, 0)]
    # The chart's points are rows of observations.csv: compared, like it, relative to their column's largest value.
    points_a, points_b = fit_a["chart"].pop("points"), fit_b["chart"].pop("points")
    fit_d, fit_where = _fit_digits(fit_a, fit_b)
    diff_d, _ = _fit_digits(*differences)
    if len(points_a) == len(points_b) and points_a:
        pa_, pb_ = (
            np.array([[np.nan if v is None else v for v in row] for row in pts]) for pts in (points_a, points_b)
        )
        diff = np.nanmax(np.abs(pa_ - pb_), axis=0) / np.nanmax(np.abs(pa_), axis=0)
        worst = float(np.nanmax(diff))
        points_d = math.inf if worst == 0 else -math.log10(worst)
        if points_d < fit_d:
            fit_d, fit_where = points_d, ".chart.points"
    else:
        fit_d, fit_where = 0.0, ".chart.points (not the same rows)"
    fit_where += f"; Breusch–Pagan and RESET {diff_d:.1f}"
    obs_d, obs_where = math.inf, ""
    reader_a = pd.read_csv(folder_a / "observations.csv", chunksize=1_000_000)
    reader_b = pd.read_csv(folder_b / "observations.csv", chunksize=1_000_000)
    scales: dict[str, float] = {}
    for ca, cb in zip(reader_a, reader_b, strict=True):
        for col in ca.columns:
            if ca[col].dtype.kind != "f":
                continue
            x, y = ca[col].to_numpy(), cb[col].to_numpy()
            scales[col] = max(scales.get(col, 0.0), float(np.nanmax(np.abs(x))))
            diff = float(np.nanmax(np.abs(x - y)))
            d = math.inf if diff == 0 else -math.log10(diff / scales[col])
            if d < obs_d:
                obs_d, obs_where = d, col
    return fit_d, fit_where, obs_d, obs_where


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, nargs="+", default=[1_000_000, 10_000_000])
    parser.add_argument("--compare", action="store_true", help="also build the file whole and compare")
    parser.add_argument("--chunk-rows", type=int, default=None)
    args = parser.parse_args()
    print(f"{'rows':>12} {'MB':>8} {'chunked s':>10} {'peak MB':>8} {'whole s':>8} {'peak MB':>8} {'digits':>16}")
    for rows in args.rows:
        tmp = Path(tempfile.mkdtemp(prefix="sitegen-stream-bench-"))
        try:
            need = rows * (_BYTES_PER_ROW + _OBSERVATION_BYTES_PER_ROW * (2 if args.compare else 1))
            free = shutil.disk_usage(tmp).free
            if need > free:
                print(f"{rows:>12,} skipped: needs about {need / 1e9:.1f} GB of disk, {free / 1e9:.1f} GB free")
                continue
            limits = (
                f"[limits]\nmax_rows = {rows + 1}\nmax_megabytes = {rows * _BYTES_PER_ROW / 1e6 * 2 + 10:.0f}\n"
                "max_fit_seconds = 100000\n"
            )
            chunked, whole = tmp / "chunked", tmp / "whole"
            chunked.mkdir()
            make_csv(chunked / "log.csv", rows)
            size_mb = (chunked / "log.csv").stat().st_size / 1e6
            extra = f"stream_chunk_rows = {args.chunk_rows}\n" if args.chunk_rows else ""
            (chunked / "site.toml").write_text(limits + "stream_above_megabytes = 0\n" + extra, encoding="utf-8")
            (chunked / "log.toml").write_text('model = "y ~ x"\n', encoding="utf-8")
            seconds, peak, code = build(chunked, tmp / "site-chunked")
            line = f"{rows:>12,} {size_mb:>8.0f} {seconds:>10.1f} {peak:>8.0f}"
            fit = json.loads((tmp / "site-chunked" / "datasets" / "log" / "fit.json").read_text(encoding="utf-8"))
            if code != 0 or fit["status"] == "error" or fit["n"] != rows:
                print(f"{line}  (exit status {code}, dataset {fit['status']}: {fit['messages'][-1:]})")
                continue
            chunked_line = f"  [exit 0, {fit['n']:,} rows fitted in {fit['chunked']['chunks']:,} chunks]"
            if args.compare and rows <= _WHOLE_MAX_ROWS:
                whole.mkdir()
                shutil.copyfile(chunked / "log.csv", whole / "log.csv")
                (whole / "log.toml").write_text('model = "y ~ x"\n', encoding="utf-8")
                # read whole whatever its size (the built-in threshold would read a file from 100 MB in chunks)
                whole_limits = limits + "max_fit_megabytes = 20000\nstream_above_megabytes = 1000000\n"
                (whole / "site.toml").write_text(whole_limits, encoding="utf-8")
                w_seconds, w_peak, _ = build(whole, tmp / "site-whole")
                fit_d, fit_where, obs_d, obs_where = compare(tmp / "site-whole", tmp / "site-chunked")
                digits = f"{fit_d:.1f} / {obs_d:.1f}"
                line += f" {w_seconds:>8.1f} {w_peak:>8.0f} {digits:>16}  (least: {fit_where}; {obs_where})"
            print(line + chunked_line, flush=True)
        finally:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
