"""Numbers that cannot be trusted are not called sound; extrapolation is marked (issue 12, item 5).

The limits of double precision come from ``numpy.finfo(float)`` (largest finite ≈ 1.8e308, smallest normal
≈ 2.2e-308); the slopes of the data brought back into range are checked against ``numpy.polyfit`` as an
independent computation. The datasets are invented.
"""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from conftest import ROOT, CliResult, write_csv, write_toml

Cli = Callable[..., CliResult]
XS = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0]
YS = [2.1, 3.9, 6.2, 7.8, 10.1, 11.8]


def _rows(xs: list[float], ys: list[float]) -> str:
    return "x,y\n" + "".join(f"{x!r},{y!r}\n" for x, y in zip(xs, ys, strict=True))


def _summary(site: Path) -> dict[str, dict[str, object]]:
    return {str(r["dataset"]): r for r in json.loads((site / "summary.json").read_text("utf-8"))}


def test_float_limits_are_those_the_messages_name() -> None:
    assert 1.79e308 < float(np.finfo(np.float64).max) < 1.8e308
    assert 2.2e-308 < float(np.finfo(np.float64).tiny) < 2.3e-308


HOSTILE = {
    "flat": (XS, [5.0] * 6, "same value (5) in every row"),
    "overflowing": (XS, [1.7e308, 1.7e308, -1.7e308, 1.7e308, -1.7e308, 1.7e308], "too large to compute with"),
    "underflowing": (XS, [y * 1e-320 for y in YS], "too small to compute with"),
    "steep": ([x * 1e-300 for x in XS], YS, "the model term x varies by amounts"),
    "wide": ([x * 1e200 for x in XS], YS, "the model term x has values"),
}


def test_numbers_that_cannot_be_trusted_are_errors_not_ok(run_cli: Cli, tmp_path: Path) -> None:
    data = tmp_path / "data"
    for name, (xs, ys, _) in HOSTILE.items():
        write_csv(data / f"{name}.csv", _rows(xs, ys))
    # Large and small but representable: fitted as usual (slope against numpy.polyfit).
    write_csv(data / "large.csv", _rows([x * 1e100 for x in XS], [y * 1e100 for y in YS]))
    write_csv(data / "small.csv", _rows([x * 1e-100 for x in XS], YS))
    site = tmp_path / "site"
    res = run_cli("build", data, "-o", site, "-q")
    assert res.code == 1
    rows = _summary(site)
    for name, (_, _, why) in HOSTILE.items():
        assert rows[name]["status"] == "error", name
        assert why in str(rows[name]["message"]), (name, rows[name]["message"])
    assert "R² is undefined" in str(rows["flat"]["message"])
    assert "another unit" in str(rows["steep"]["message"])  # says what to do
    for name, scale in (("large", 1.0), ("small", 1e100)):
        assert rows[name]["status"] == "ok", rows[name]["message"]
        fit = json.loads((site / "datasets" / name / "fit.json").read_text("utf-8"))
        slope = next(c["estimate"] for c in fit["coefficients"] if c["term"] == "x")
        assert slope == pytest.approx(np.polyfit(XS, YS, 1)[0] * scale, rel=1e-12)


def test_no_numerical_warning_reaches_the_terminal(tmp_path: Path) -> None:
    data = tmp_path / "data"
    for name, (xs, ys, _) in HOSTILE.items():
        write_csv(data / f"{name}.csv", _rows(xs, ys))
    for jobs in ("1", "2"):
        done = subprocess.run(
            [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(tmp_path / f"site{jobs}"), "-j", jobs],
            capture_output=True,
            text=True,
            check=False,
            cwd=ROOT,
        )
        assert done.returncode == 1
        assert "Warning" not in done.stderr, done.stderr
        assert "encountered" not in done.stderr, done.stderr
        assert "Traceback" not in done.stderr


def _csv(path: Path) -> list[dict[str, str]]:
    with path.open(encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


def test_extrapolation_is_marked_on_the_page_in_the_downloads_and_in_the_status(run_cli: Cli, tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "inside.csv", _rows(XS, YS))
    write_toml(data / "inside.toml", {"model": "y ~ x", "predict_at": [2.5, 6.0], "calibrate": [4.0, 11.0]})
    write_csv(data / "beyond.csv", _rows(XS, YS))
    write_toml(data / "beyond.toml", {"model": "y ~ x", "predict_at": [3.0, 50.0], "calibrate": [6.0, 100.0]})
    site = tmp_path / "site"
    assert run_cli("build", data, "-o", site, "-q").code == 0
    rows = _summary(site)
    assert rows["inside"]["status"] == "ok"
    assert rows["beyond"]["status"] == "warn"
    assert "extrapolation" in str(rows["beyond"]["message"])
    # The downloads: a column, true only for the rows outside the data (x from 1 to 6).
    pred = _csv(site / "datasets" / "beyond" / "predictions.csv")
    assert [(r["x"], r["extrapolated"]) for r in pred] == [("3.0", "False"), ("50.0", "True")]
    cal = _csv(site / "datasets" / "beyond" / "calibration.csv")
    assert [(r["response"], r["extrapolated"]) for r in cal] == [("6.0", "False"), ("100.0", "True")]
    assert {r["extrapolated"] for r in _csv(site / "datasets" / "inside" / "predictions.csv")} == {"False"}
    # The read-back of 100 lies far beyond x = 6 (numpy.polyfit's line, independently).
    slope, intercept = np.polyfit(XS, YS, 1)
    assert float(cal[1]["estimate"]) == pytest.approx((100 - intercept) / slope, rel=1e-9)
    # The page: a mark in each table row outside the data.
    page = (site / "datasets" / "beyond" / "index.html").read_text("utf-8")
    assert page.count('class="extrapolated"') == 2
    inside = (site / "datasets" / "inside" / "index.html").read_text("utf-8")
    assert 'class="extrapolated"' not in inside


def test_predictions_beyond_floating_point_are_left_out_with_the_reason(run_cli: Cli, tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "line.csv", _rows(XS, YS))
    write_toml(data / "line.toml", {"model": "y ~ x", "predict_at": [3.0, 1e308], "calibrate": [5.0, 1.7e308]})
    site = tmp_path / "site"
    assert run_cli("build", data, "-o", site, "-q").code == 0
    fit = json.loads((site / "datasets" / "line" / "fit.json").read_text("utf-8"))
    texts = " ".join(m["text"] for m in fit["messages"])
    assert "predict_at x = 1e+308: the prediction is beyond the range of floating-point numbers" in texts
    assert "too large for floating-point arithmetic" in texts
    assert [r["x"] for r in _csv(site / "datasets" / "line" / "predictions.csv")] == ["3.0"]
    assert fit["status"] == "warn"
