"""The command line, run in this process: exit status, messages, and what is written.

Contract (DESIGN.md, "Command line"): 0 every dataset fitted (warnings allowed);
1 the site was written but at least one dataset failed; 2 nothing was written
(usage or configuration error, or an unsafe output folder).
"""

from __future__ import annotations

import csv
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import FIT_JSON_KEYS, ROOT, Built, CliResult, cli, tree_snapshot, write_csv, write_toml

from sitegen import __version__


def assert_no_traceback(result: CliResult) -> None:
    assert "Traceback" not in result.output, result.output
    assert 'File "' not in result.output, result.output


def summary_rows(site: Path) -> list[dict[str, str]]:
    with (site / "summary.csv").open(newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


def test_build_clean_folder_exits_0(small_data: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    result = cli("build", small_data, "-o", site, "-j", "1")
    assert result.code == 0, result.output
    assert_no_traceback(result)
    assert (site / "index.html").is_file()
    assert [r["dataset"] for r in summary_rows(site)] == ["alpha", "beta", "section-gamma"]
    assert all(r["status"] in ("ok", "warn") for r in summary_rows(site))
    # The closing line names the site; only the CLI prints, and it printed to the given stream.
    assert "index.html" in result.stream


def test_example_build_exits_0(example_build: Built) -> None:
    assert example_build.result.code == 0
    assert_no_traceback(example_build.result)


def test_one_broken_dataset_exits_1_and_the_rest_is_built(small_data: Path, tmp_path: Path) -> None:
    write_csv(small_data / "broken.csv", "x,y\n1,2\n2,not-a-number\n3,4\n4,5\n")
    write_toml(small_data / "broken.toml", {"model": "y ~ x"})
    site = tmp_path / "site"
    result = cli("build", small_data, "-o", site, "-j", "1")
    assert result.code == 1, result.output
    assert_no_traceback(result)
    assert "broken.csv" in result.stream  # the message names the file
    rows = {r["dataset"]: r for r in summary_rows(site)}
    assert set(rows) == {"alpha", "beta", "broken", "section-gamma"}
    assert rows["broken"]["status"] == "error"
    assert rows["broken"]["message"], "an error row explains itself"
    assert all(rows[s]["status"] in ("ok", "warn") for s in ("alpha", "beta", "section-gamma"))
    for slug in ("alpha", "beta", "section-gamma"):
        assert (site / "datasets" / slug / "coefficients.csv").is_file()
    page = (site / "datasets" / "broken" / "index.html").read_text(encoding="utf-8")
    assert "broken.csv" in page
    assert "not-a-number" in page  # the reason is shown on the error page
    fit = json.loads((site / "datasets" / "broken" / "fit.json").read_text(encoding="utf-8"))
    assert set(FIT_JSON_KEYS) <= set(fit)
    assert fit["status"] == "error"
    assert any(m["level"] == "error" and "not-a-number" in m["text"] for m in fit["messages"])
    assert rows["broken"]["message"] in [m["text"] for m in fit["messages"]]


def test_dataset_without_model_and_not_two_numeric_columns_is_an_error_not_a_crash(
    small_data: Path, tmp_path: Path
) -> None:
    write_csv(small_data / "three_columns.csv", "a,b,c\n1,2,3\n2,3,5\n3,4,6\n4,6,7\n")
    site = tmp_path / "site"
    result = cli("build", small_data, "-o", site, "-j", "1")
    assert result.code == 1, result.output
    assert_no_traceback(result)
    assert "three_columns.csv" in result.stream
    assert {r["dataset"]: r["status"] for r in summary_rows(site)}["three-columns"] == "error"


@pytest.mark.parametrize(
    "argv",
    [
        pytest.param(["build", "{data}"], id="missing-output"),
        pytest.param(["bulid", "{data}", "-o", "{site}"], id="unknown-command"),
        pytest.param([], id="no-command"),
        pytest.param(["build", "{data}", "-o", "{site}", "--no-such-option"], id="unknown-option"),
        pytest.param(["build", "{data}", "-o", "{site}", "--jobs", "0"], id="jobs-zero"),
    ],
)
def test_usage_errors_exit_2_and_write_nothing(argv: list[str], small_data: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    before = tree_snapshot(tmp_path)
    result = cli(*(a.format(data=small_data, site=site) for a in argv))
    assert result.code == 2, result.output
    assert_no_traceback(result)
    assert result.output.strip(), "a usage error says what is wrong"
    assert tree_snapshot(tmp_path) == before


def test_missing_output_option_is_named(small_data: Path) -> None:
    result = cli("build", small_data)
    assert result.code == 2
    assert "-o" in result.output or "--output" in result.output


def test_nonexistent_data_folder_exits_2(tmp_path: Path) -> None:
    site = tmp_path / "site"
    result = cli("build", tmp_path / "no-such-folder", "-o", site)
    assert result.code == 2, result.output
    assert_no_traceback(result)
    assert "no-such-folder" in result.stream
    assert not site.exists()
    assert list(tmp_path.iterdir()) == []


def test_data_folder_that_is_a_file_exits_2(tmp_path: Path) -> None:
    data = write_csv(tmp_path / "data.csv", "x,y\n1,2\n")
    result = cli("build", data, "-o", tmp_path / "site")
    assert result.code == 2, result.output
    assert_no_traceback(result)
    assert not (tmp_path / "site").exists()


@pytest.mark.parametrize(
    "site_toml",
    [
        pytest.param('title = "unclosed\n', id="not-toml"),
        pytest.param("title = 3\n", id="title-not-a-string"),
        pytest.param("[defaults]\nlevel = 1.5\n", id="bad-default-level"),
        pytest.param("[limits]\nmax_rows = -1\n", id="bad-limit"),
        pytest.param('theme = "no/such/theme/folder"\n', id="missing-theme"),
    ],
)
def test_invalid_site_toml_exits_2_and_writes_nothing(site_toml: str, small_data: Path, tmp_path: Path) -> None:
    write_toml(small_data / "site.toml", site_toml)
    site = tmp_path / "site"
    before = tree_snapshot(tmp_path)
    result = cli("build", small_data, "-o", site, "-j", "1")
    assert result.code == 2, result.output
    assert_no_traceback(result)
    assert "site.toml" in result.stream or "theme" in result.stream
    assert tree_snapshot(tmp_path) == before


def test_version() -> None:
    result = cli("--version")
    assert result.code == 0
    assert f"sitegen {__version__}" in result.output
    assert_no_traceback(result)


def test_help_in_process_exits_0() -> None:
    result = cli("--help")
    assert result.code == 0
    assert "build" in result.output
    assert_no_traceback(result)


def test_python_dash_m_help() -> None:
    proc = subprocess.run(
        [sys.executable, "-m", "sitegen", "--help"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=False,
        timeout=120,
    )
    assert proc.returncode == 0, proc.stderr
    assert "build" in proc.stdout
    assert "Traceback" not in proc.stdout + proc.stderr


@pytest.mark.parametrize(("given", "expected"), [(None, "1"), ("3", "3")])
def test_the_program_uses_one_blas_thread_per_process_unless_told(given: str | None, expected: str) -> None:
    """Datasets are fitted in parallel processes: each gets one BLAS thread, unless the user set the number."""
    names = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
    env = {k: v for k, v in os.environ.items() if k not in names}
    if given is not None:
        env["OPENBLAS_NUM_THREADS"] = given
    code = (
        "import atexit, os, sys; "
        "atexit.register(lambda: print(os.environ['OPENBLAS_NUM_THREADS'], os.environ['OMP_NUM_THREADS'])); "
        "sys.argv = ['sitegen', '--version']; from sitegen.cli import entrypoint; entrypoint()"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=False)
    assert out.stdout.split()[-2:] == [expected, "1"], out
