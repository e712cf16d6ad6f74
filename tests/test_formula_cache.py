"""What patsy worked out about a formula is kept in the user's cache; a doctored cache is not trusted.

Real CLI runs with the cache folder pointed at a tmp folder.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from conftest import ROOT, write_csv, write_toml


def _build(data: Path, site: Path, cache: Path) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, XDG_CACHE_HOME=str(cache))
    return subprocess.run(
        [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(site), "-q"],
        capture_output=True, text=True, env=env, cwd=ROOT, check=False,
    )  # fmt: skip


def test_a_known_formula_is_fitted_without_importing_patsy(tmp_path: Path) -> None:
    data, cache = tmp_path / "data", tmp_path / "cache"
    data.mkdir()
    write_csv(data / "a.csv", "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n")
    write_toml(data / "a.toml", {"model": "y ~ x + I(x**2)"})
    assert _build(data, tmp_path / "one", cache).returncode == 0
    record = json.loads((cache / "sitegen" / "formulas.json").read_text(encoding="utf-8"))
    assert any('"y ~ x + I(x**2)"' in key for key in record)
    code = (
        "import sys, runpy; sys.argv = ['sitegen', 'build', sys.argv[1], '-o', sys.argv[2], '-q', '--jobs', '1'];"
        "\ntry:\n    runpy.run_module('sitegen', run_name='__main__')\nexcept SystemExit:\n    pass\n"
        "print(sorted(m for m in sys.modules if m.split('.')[0] in ('patsy', 'pandas', 'scipy')))"
    )
    env = dict(os.environ, XDG_CACHE_HOME=str(cache))
    out = subprocess.run(
        [sys.executable, "-c", code, str(data), str(tmp_path / "two")],
        capture_output=True, text=True, env=env, cwd=ROOT, check=True,
    )  # fmt: skip
    assert out.stdout.strip().splitlines()[-1] == "[]"
    one = json.loads((tmp_path / "one" / "datasets" / "a" / "fit.json").read_text(encoding="utf-8"))
    two = json.loads((tmp_path / "two" / "datasets" / "a" / "fit.json").read_text(encoding="utf-8"))
    assert one["coefficients"] == two["coefficients"]
    assert [c["term"] for c in two["coefficients"]] == ["Intercept", "x", "I(x ** 2)"]


def _built_once(tmp_path: Path) -> tuple[Path, Path, Path, dict[str, object]]:
    """(data folder, cache folder, the cache record's path, its content) after one build of y ~ x."""
    data, cache = tmp_path / "data", tmp_path / "cache"
    data.mkdir()
    write_csv(data / "a.csv", "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n")
    assert _build(data, tmp_path / "one", cache).returncode == 0
    path = cache / "sitegen" / "formulas.json"
    return data, cache, path, json.loads(path.read_text(encoding="utf-8"))


def test_a_doctored_cache_cannot_run_code(tmp_path: Path) -> None:
    data, cache, path, record = _built_once(tmp_path)
    marker = tmp_path / "ran"
    evil = f"np.lib.format.os.system('touch {marker}')"
    for key, value in record.items():
        if key.startswith('["plan"') and isinstance(value, dict) and value:
            value["x_terms"] = [[], [evil]]
    path.write_text(json.dumps(record), encoding="utf-8")
    (data / "a.csv").write_text("x,y\n1,2.0\n2,4.1\n3,5.9\n4,8.2\n5,9.9\n", encoding="utf-8")
    result = _build(data, tmp_path / "one", cache)
    assert result.returncode == 0, result.stderr
    assert not marker.exists()
    fit = json.loads((tmp_path / "one" / "datasets" / "a" / "fit.json").read_text(encoding="utf-8"))
    assert [c["term"] for c in fit["coefficients"]] == ["Intercept", "x"]


def test_a_doctored_parse_record_does_not_let_a_formula_past_the_check(tmp_path: Path) -> None:
    """A record pairing a harmful formula with harmless codes is not believed: the formula is parsed and refused."""
    data, cache, path, record = _built_once(tmp_path)
    marker = tmp_path / "ran"
    evil = f"y ~ x + I(__import__('os').system('touch {marker}'))"
    honest_key = next(k for k in record if k.startswith('["parse"'))
    record[honest_key.replace('"y ~ x"', json.dumps(evil))] = {"lhs": ["y"], "rhs": ["x"], "intercept": True}
    path.write_text(json.dumps(record), encoding="utf-8")
    write_toml(data / "a.toml", {"model": evil})
    result = _build(data, tmp_path / "one", cache)
    assert result.returncode == 1
    assert not marker.exists()
    fit = json.loads((tmp_path / "one" / "datasets" / "a" / "fit.json").read_text(encoding="utf-8"))
    assert fit["status"] == "error"
    assert "not allowed" in fit["messages"][-1]["text"]
