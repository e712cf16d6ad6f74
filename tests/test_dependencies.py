"""pyproject.toml says what is used: every runtime dependency is imported by sitegen's own code, and every
test-only library is imported by the tests (setuptools builds the wheel in test_wheel.py)."""

from __future__ import annotations

import ast
import re
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
#: Distribution name -> the module it provides, where they differ.
MODULE = {"markdown-it-py": "markdown_it", "vl-convert-python": "vl_convert"}


def _requirements(names: list[str]) -> set[str]:
    return {re.split(r"[<>=!~\[ ;]", n, maxsplit=1)[0] for n in names}


def _imported(folder: Path) -> set[str]:
    found: set[str] = set()
    for path in folder.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text("utf-8"))):
            if isinstance(node, ast.Import):
                found |= {a.name.split(".")[0] for a in node.names}
            elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                found.add(node.module.split(".")[0])
            elif (  # pytest.importorskip("name") imports too
                isinstance(node, ast.Call)
                and isinstance(node.func, ast.Attribute)
                and node.func.attr == "importorskip"
                and node.args
                and isinstance(node.args[0], ast.Constant)
                and isinstance(node.args[0].value, str)
            ):
                found.add(node.args[0].value.split(".")[0])
    return found


def test_every_dependency_is_imported_where_it_is_declared() -> None:
    project = tomllib.loads((ROOT / "pyproject.toml").read_text("utf-8"))["project"]
    runtime = _requirements(project["dependencies"])
    extra = _requirements(project["optional-dependencies"]["cluster"])  # optional at run time, tested too
    test_only = _requirements(project["optional-dependencies"]["test"]) - {"setuptools"} - extra
    in_code = _imported(ROOT / "sitegen")
    in_tests = _imported(ROOT / "tests") | _imported(ROOT / "bench")
    assert {MODULE.get(n, n) for n in runtime} <= in_code
    assert {MODULE.get(n, n) for n in extra} <= in_code & in_tests
    assert {MODULE.get(n, n) for n in test_only} <= in_tests
    assert not {MODULE.get(n, n) for n in test_only} & in_code, "a test-only library is imported at run time"
