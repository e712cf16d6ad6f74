"""Benchmark: one large ``y ~ x`` dataset, sitegen against the floor for the same work, in the same run.

The floor is the least a program must do to give the same per-row results: read the CSV (pandas' C
reader), fit the line (numpy QR), leverage, studentized residuals, Cook's distance, DFFITS, confidence and
prediction bands for every row, the flags, and write the same observations file with pyarrow's CSV writer
(no spreadsheet care, no shortest-``repr`` spelling). sitegen does all that plus its extended-precision
fit, model checks, charts, pages and the publishing of a site.

Usage: ``python bench/large.py [--rows 1000000 10000000] [--repeat 1] [--whole]`` (``--whole``: every file read
whole, as a file under 10 MB or one whose sidecar asks for what only a whole-file fit offers is). Prints, per size, the median
seconds and peak memory of each, their ratio, and sitegen's peak memory per row above a 10-row build
(the interpreter with sitegen's imports) and above the same process with the libraries a large file needs
loaded (pandas' reader and pyarrow, which a 10-row build does not load: a fixed cost, not a per-row one). Goals (issue 18): ratio ≤ 3 at 1 M and 10 M rows; ≤ 200 bytes
per row. The machine is shared: compare ratios from one run, not seconds across runs.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

_PEAK = (
    "import resource,subprocess,sys,time;t=time.perf_counter();r=subprocess.run(sys.argv[1:]);"
    "s=time.perf_counter()-t;"
    "m=resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss;"
    "print('%BENCH%',s,m,r.returncode)"
)

_FLOOR = r"""
import sys
import numpy as np, pandas as pd, pyarrow as pa, pyarrow.csv as pacsv
from scipy import stats
src, out = sys.argv[1], sys.argv[2]
frame = pd.read_csv(src, engine="c")
x = frame["x"].to_numpy(float); y = frame["y"].to_numpy(float); del frame
n = len(x); X = np.column_stack([np.ones(n), x])
q, r = np.linalg.qr(X)
beta = np.linalg.solve(r, q.T @ y)
fitted = X @ beta; resid = y - fitted; del X
p, df = 2, n - 2
h = np.einsum("ij,ij->i", q, q); del q
s2 = resid @ resid / df
std = resid / np.sqrt(s2 * (1 - h))
cooks = std**2 * h / (p * (1 - h))
deleted = (resid @ resid - resid**2 / (1 - h)) / (df - 1)
stud = resid / np.sqrt(deleted * (1 - h)); del deleted
dffits = stud * np.sqrt(h / (1 - h))
t = stats.t.ppf(0.975, df)
se_mean = np.sqrt(s2 * h)
se_pred = np.sqrt(s2 * (1 + h))
code = ((h > 2 * p / n).astype(np.int8) | (np.abs(stud) > 3) * 2 | (cooks > 4 / n) * 4
        | (np.abs(dffits) > 2 * np.sqrt(p / n)) * 8).astype(np.int8)
words = ["leverage above 2p/n", "|studentized residual| above 3", "Cook's distance above 4/n", "|DFFITS| above 2√(p/n)"]
texts = pa.array(["; ".join(w for b, w in enumerate(words) if c >> b & 1) for c in range(16)])
table = pa.table({
    "row": np.arange(1, n + 1), "x": x, "y": y, "fitted": fitted, "residual": resid,
    "mean_ci_low": fitted - t * se_mean, "mean_ci_high": fitted + t * se_mean,
    "pred_low": fitted - t * se_pred, "pred_high": fitted + t * se_pred,
    "leverage": h, "studentized_residual": stud, "cooks_distance": cooks, "dffits": dffits,
    "flags": pa.DictionaryArray.from_arrays(pa.array(code), texts),
})
pacsv.write_csv(table, out)
"""


#: The process a large build's worker is before its first row: the interpreter with sitegen's fitting modules
#: and the libraries a large file needs (pandas' reader, pyarrow for the observations writer), which a 10-row
#: build never loads (it reads with the plain reader). Their ~85 MB are not per-row memory.
_LIBRARIES = (
    "import sitegen.analyze, sitegen.jobs, sitegen.report.files, sitegen.stream.fit, pandas, pyarrow.compute; "
    "import sitegen.cli"
)


def make_dataset(folder: Path, rows: int, seed: int = 18, *, whole: bool = False) -> Path:
    """A ``y ~ x`` CSV of ``rows`` rows (6 decimals, like a logger's export) and its sidecar, in chunks;
    ``whole``: site.toml has it read whole whatever its size."""
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    path = folder / "log.csv"
    with path.open("w", encoding="utf-8") as fh:
        fh.write("x,y\n")
        for start in range(0, rows, 1_000_000):
            m = min(1_000_000, rows - start)
            x = rng.uniform(0, 50, m)
            y = 1.5 + 0.8 * x + rng.normal(0, 1.0, m)
            np.savetxt(fh, np.column_stack([x, y]), fmt="%.6f", delimiter=",")
    (folder / "log.toml").write_text('title = "Sensor log"\nmodel = "y ~ x"\n', encoding="utf-8")
    limits = f"[limits]\nmax_rows = {max(rows, 10)}\nmax_megabytes = {max(1.0, 2 * path.stat().st_size / 1e6):.0f}\n"
    if whole:
        limits += f"stream_above_megabytes = {max(1.0, 2 * path.stat().st_size / 1e6):.0f}\n"
    (folder / "site.toml").write_text(limits, encoding="utf-8")
    return path


def timed(cmd: list[str]) -> tuple[float, float]:
    """Seconds and peak RSS (MB) of a command run as a child process."""
    out = subprocess.run([sys.executable, "-c", _PEAK, *cmd], capture_output=True, text=True, check=False)
    line = next(ln for ln in out.stdout.splitlines() if ln.startswith("%BENCH%"))
    _, s, m, rc = line.split()
    if int(rc) != 0:
        raise SystemExit(f"command failed ({rc}): {' '.join(cmd)}\n{out.stderr[-2000:]}")
    return float(s), int(m) / 1024


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, nargs="+", default=[1_000_000, 10_000_000])
    ap.add_argument("--repeat", type=int, default=1, help="runs per figure; the median is reported")
    ap.add_argument("--keep", action="store_true", help="keep the temporary folder")
    ap.add_argument(
        "--whole", action="store_true", help="read every file whole (the built-in threshold reads from 10 MB in chunks)"
    )
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="sitegen-large-"))
    sitegen = [sys.executable, "-m", "sitegen", "build"]
    results = []
    try:
        tiny = tmp / "tiny"
        make_dataset(tiny, 10)
        timed([*sitegen, str(tiny), "-o", str(tmp / "tiny-site"), "-q"])  # warm the chart-bundle cache
        _, base_mb = timed([*sitegen, str(tiny), "-o", str(tmp / "tiny-site"), "-q", "--refit"])
        _, libs_mb = timed([sys.executable, "-c", _LIBRARIES])
        for rows in args.rows:
            data = tmp / f"data-{rows}"
            csv = make_dataset(data, rows, whole=args.whole)
            floor_s, floor_mb, site_s, site_mb = [], [], [], []
            for _ in range(args.repeat):  # alternate, so that both meet the same load on a shared machine
                s, m = timed([sys.executable, "-c", _FLOOR, str(csv), str(tmp / "floor.csv")])
                floor_s.append(s)
                floor_mb.append(m)
                site = tmp / f"site-{rows}"
                s, m = timed([*sitegen, str(data), "-o", str(site), "-q", "--refit"])
                site_s.append(s)
                site_mb.append(m)
                shutil.rmtree(site, ignore_errors=True)
            f, g = statistics.median(floor_s), statistics.median(site_s)
            results.append(
                {
                    "rows": rows,
                    "csv_mb": round(csv.stat().st_size / 1e6, 1),
                    "floor_s": round(f, 2),
                    "sitegen_s": round(g, 2),
                    "ratio": round(g / f, 2),
                    "floor_peak_mb": round(max(floor_mb), 1),
                    "sitegen_peak_mb": round(max(site_mb), 1),
                    "sitegen_bytes_per_row": round((max(site_mb) - base_mb) * 2**20 / rows, 1),
                    "bytes_per_row_above_libraries": round((max(site_mb) - libs_mb) * 2**20 / rows, 1),
                }
            )
            shutil.rmtree(data)
    finally:
        if args.keep:
            print(f"kept {tmp}", file=sys.stderr)
        else:
            shutil.rmtree(tmp, ignore_errors=True)
    print(
        json.dumps(
            {
                "interpreter_peak_mb": round(base_mb, 1),
                "libraries_peak_mb": round(libs_mb, 1),
                "when": time.strftime("%Y-%m-%d %H:%M"),
            }
        )
    )
    head = (
        "rows",
        "csv_mb",
        "floor_s",
        "sitegen_s",
        "ratio",
        "floor_peak_mb",
        "sitegen_peak_mb",
        "sitegen_bytes_per_row",
        "bytes_per_row_above_libraries",
    )
    print(" | ".join(head))
    for r in results:
        print(" | ".join(str(r[k]) for k in head))


if __name__ == "__main__":
    main()
