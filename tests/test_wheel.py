"""The built wheel holds the whole program: every module under sitegen/ and the top-level default theme.

The wheel is built offline from a copy of the source (pip with the environment's own setuptools), so the test
neither writes into the checkout nor needs the package index.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow
def test_the_wheel_ships_every_module_and_the_default_theme(tmp_path: Path) -> None:
    src = tmp_path / "src"
    src.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copyfile(ROOT / name, src / name)
    skip = shutil.ignore_patterns("__pycache__", "*.pyc")
    for folder in ("sitegen", "themes"):
        shutil.copytree(ROOT / folder, src / folder, ignore=skip)
    out = tmp_path / "dist"
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "wheel",
            "--no-deps",
            "--no-build-isolation",
            "--no-index",
            "-q",
            "-w",
            str(out),
            str(src),
        ],
        capture_output=True,
        text=True,
        check=False,
        cwd=tmp_path,
    )
    assert done.returncode == 0, done.stderr[-3000:]
    (wheel,) = out.glob("sitegen-*.whl")
    with zipfile.ZipFile(wheel) as z:
        names = set(z.namelist())
    modules = {p.relative_to(ROOT).as_posix() for p in (ROOT / "sitegen").rglob("*.py")}
    assert modules <= names, sorted(modules - names)
    theme = {
        "sitegen/" + p.relative_to(ROOT).as_posix() for p in (ROOT / "themes" / "default").rglob("*") if p.is_file()
    }
    assert "sitegen/themes/default/templates/sections/estimates.html" in theme
    assert theme <= names, sorted(theme - names)
    assert "sitegen/report/chart_specs.json" in names
