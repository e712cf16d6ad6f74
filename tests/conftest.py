"""Shared fixtures for the end-to-end tests: the real CLI, real folders, real files.

* ``run_cli`` runs ``sitegen.cli.main`` in this process and returns its exit status
  and everything it printed (the ``stream`` it was given plus anything written to
  ``sys.stdout``/``sys.stderr``, where argparse prints usage and ``--version``).
* ``example_build`` is one copy of ``example_project`` built once per session into a
  temporary folder; tests only read it.
* ``write_csv`` / ``write_toml`` / ``small_data`` write small datasets into ``tmp_path``.
* ``tree_snapshot`` records every path and every file's bytes under a folder, to
  prove that a refused build touched nothing.

The chart bundle cache (``$XDG_CACHE_HOME/sitegen``) is pointed at a session
temporary folder so the tests never write into the user's home.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import shutil
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

from sitegen.cli import main

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "example_project"

# The contract's column lists (DESIGN.md, "Output layout").
SUMMARY_COLUMNS = [
    "dataset",
    "title",
    "status",
    "n",
    "df_resid",
    "r_squared",
    "adj_r_squared",
    "residual_std_error",
    "f_stat",
    "f_p_value",
    "message",
]
COEFFICIENT_COLUMNS = ("term", "estimate", "std_error", "t_stat", "p_value", "ci_low", "ci_high")
OBSERVATION_COLUMNS = ("fitted", "residual", "mean_ci_low", "mean_ci_high", "pred_low", "pred_high")
DIAGNOSTIC_COLUMNS = ("leverage", "studentized_residual", "cooks_distance", "dffits")
FIT_JSON_KEYS = (
    "dataset",
    "title",
    "model",
    "status",
    "level",
    "n",
    "df_model",
    "df_resid",
    "r_squared",
    "adj_r_squared",
    "residual_std_error",
    "f_stat",
    "f_p_value",
    "coefficients",
    "messages",
)

# A small straight-line dataset (invented): y ≈ 2x with a little scatter.
LINE_CSV = "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n6,11.8\n"


@dataclass(frozen=True, slots=True)
class CliResult:
    """What one in-process CLI run returned and printed."""

    code: int
    stream: str  # what sitegen printed to the stream it was given
    stdout: str  # what went to sys.stdout (argparse: --help, --version)
    stderr: str  # what went to sys.stderr (argparse: usage errors)

    @property
    def output(self) -> str:
        return self.stream + self.stdout + self.stderr


def cli(*args: str | Path) -> CliResult:
    """Run ``sitegen ARGS`` in this process, capturing all output."""
    stream, out, err = io.StringIO(), io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in args], stream=stream)
    return CliResult(code, stream.getvalue(), out.getvalue(), err.getvalue())


@pytest.fixture
def run_cli() -> Callable[..., CliResult]:
    return cli


@pytest.fixture(scope="session", autouse=True)
def _private_bundle_cache(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    """Keep sitegen's chart-bundle cache out of the user's home during the tests."""
    old = os.environ.get("XDG_CACHE_HOME")
    os.environ["XDG_CACHE_HOME"] = str(tmp_path_factory.mktemp("xdg-cache"))
    yield
    if old is None:
        os.environ.pop("XDG_CACHE_HOME", None)
    else:
        os.environ["XDG_CACHE_HOME"] = old


@dataclass(frozen=True, slots=True)
class Built:
    """A data folder and the site built from it."""

    data: Path
    site: Path
    result: CliResult


def copy_example(target: Path) -> Path:
    """Copy example_project (datasets, sidecars, site.toml) to ``target``."""
    shutil.copytree(EXAMPLE, target, ignore=shutil.ignore_patterns("__pycache__"))
    return target


@pytest.fixture(scope="session")
def example_build(tmp_path_factory: pytest.TempPathFactory) -> Built:
    """example_project copied to a temporary folder and built once (default --jobs: the process pool)."""
    base = tmp_path_factory.mktemp("example")
    data = copy_example(base / "data")
    site = base / "site"
    result = cli("build", data, "-o", site)
    assert result.code == 0, result.output
    return Built(data, site, result)


#: Debian's Chromium: the browser tests drive it through Playwright and never download one.
CHROMIUM = Path("/usr/bin/chromium")
#: The marks of a browser test module (``pytestmark = BROWSER_MARKS``): its tests are skipped without Chromium.
BROWSER_MARKS = [
    pytest.mark.browser,
    pytest.mark.skipif(
        not CHROMIUM.is_file(),
        reason="Debian's Chromium is not at /usr/bin/chromium (run scripts/ensure-browser.sh); "
        "these tests never download a browser",
    ),
]


@pytest.fixture(scope="module")
def browser() -> Iterator[Any]:
    """Headless Chromium for one test module (the module marks itself ``browser`` and skips without it)."""
    sync_api = pytest.importorskip("playwright.sync_api", reason="Playwright for Python is not installed")
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=str(CHROMIUM), headless=True)
        try:
            yield b
        finally:
            b.close()


def build_exit_code(data: Path, site: Path) -> int:
    """Build ``data`` into ``site`` through the command line, one dataset at a time; the exit code."""
    return cli("build", data, "-o", site, "-j", "1").code


def fit_json(site: Path, slug: str) -> dict[str, Any]:
    """A built dataset's fit.json, parsed."""
    body = json.loads((site / "datasets" / slug / "fit.json").read_text(encoding="utf-8"))
    assert isinstance(body, dict)
    return body


def slopes_by_title(site: Path) -> dict[str, float]:
    """Title → the estimate of term ``x``, from each built dataset's fit.json."""
    out = {}
    for path in sorted((site / "datasets").glob("*/fit.json")):
        fit = json.loads(path.read_text("utf-8"))
        out[fit["title"]] = next(c["estimate"] for c in fit["coefficients"] if c["term"] == "x")
    return out


def dataset_page(site: Path, slug: str) -> str:
    """A built dataset's page."""
    return (site / "datasets" / slug / "index.html").read_text(encoding="utf-8")


def write_csv(path: Path, text: str | Sequence[Sequence[object]]) -> Path:
    """Write a CSV file (text as given, or rows joined by commas); creates parent folders."""
    if not isinstance(text, str):
        text = "".join(",".join(str(c) for c in row) + "\n" for row in text)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(text.encode("utf-8"))
    return path


def _toml_value(v: object) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"no TOML form for {v!r} in this helper")


def write_toml(path: Path, keys: Mapping[str, object] | str) -> Path:
    """Write a TOML file from text or from a flat mapping of simple values."""
    text = keys if isinstance(keys, str) else "".join(f"{k} = {_toml_value(v)}\n" for k, v in keys.items())
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture
def small_data(tmp_path: Path) -> Path:
    """A data folder with three good datasets: two at the root (one with a sidecar), one in a section."""
    data = tmp_path / "data"
    write_csv(data / "alpha.csv", LINE_CSV)
    write_toml(data / "alpha.toml", {"title": "Alpha line", "model": "y ~ x"})
    write_csv(data / "beta.csv", "dose,response\n0,0.11\n1,0.52\n2,0.87\n3,1.33\n4,1.71\n5,2.08\n")
    write_csv(data / "section" / "gamma.csv", "u,v\n1,10.2\n2,7.9\n3,6.1\n4,3.8\n5,2.2\n")
    return data


Snapshot = dict[str, bytes | None]


def tree_snapshot(root: Path) -> Snapshot:
    """Every path under ``root`` (folders as None, files with their bytes, links as their target)."""
    snap: Snapshot = {}
    if not root.exists():
        return snap
    for path in sorted(root.rglob("*")):
        rel = path.relative_to(root).as_posix()
        if path.is_symlink():
            snap[rel] = b"-> " + os.fsencode(os.readlink(path))
        elif path.is_dir():
            snap[rel] = None
        else:
            snap[rel] = path.read_bytes()
    return snap


def site_bytes(site: Path, skip: Sequence[str] = ()) -> dict[str, bytes]:
    """Every file of a site by relative path, except those named in ``skip``.

    Skipping build.json skips assets/built.js too: both carry the build time (the pages show it from there).
    """
    if "build.json" in skip:
        skip = (*skip, "assets/built.js")
    return {
        p.relative_to(site).as_posix(): p.read_bytes()
        for p in sorted(site.rglob("*"))
        if p.is_file() and p.relative_to(site).as_posix() not in skip
    }
