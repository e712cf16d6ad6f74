"""The table of output files (report/outputs.py) knows every file a build writes, and what it is."""

from __future__ import annotations

import shutil
from pathlib import Path

from conftest import EXAMPLE, cli

from sitegen.report.files import SUMMARY_FILES
from sitegen.report.history import HISTORY_FILES
from sitegen.report.outputs import CHART_IMAGES, OUTPUT_FILES, find, is_data_file, site_names


def test_every_file_a_build_writes_is_in_the_table(tmp_path: Path) -> None:
    """A full example build with every optional file turned on (the example offers source copies; chart images)."""
    data = tmp_path / "data"
    shutil.copytree(EXAMPLE, data, ignore=shutil.ignore_patterns("__pycache__", "*.py"))
    config = data / "site.toml"
    config.write_text("static_images = true\n" + config.read_text("utf-8"), "utf-8")
    site = tmp_path / "site"
    assert cli("build", data, "-o", site).code == 0
    top = {p.name for p in site.iterdir() if not p.name.startswith(".")} - {"assets", "datasets"}
    assert top == set(site_names())
    seen: set[str] = set()
    for folder in (site / "datasets").iterdir():
        for f in folder.iterdir():
            row = find(f.name, "dataset")
            assert row is not None, f"{folder.name}/{f.name} is not in the table of output files"
            seen.add(row.name)
            if row.name == "chart-":
                assert f.name in CHART_IMAGES, f.name
    assert {"fit.json", "index.html", "source-", "chart-", "tables.xlsx"} <= seen


def test_the_table_agrees_with_the_writers_names() -> None:
    assert set(SUMMARY_FILES) | set(HISTORY_FILES) <= site_names()
    dataset_rows = [o for o in OUTPUT_FILES if o.scope == "dataset"]
    assert len({(o.name, o.pattern) for o in dataset_rows}) == len(dataset_rows)
    assert all(o.description for o in dataset_rows if o.kind == "data")
    assert not is_data_file("index.html")
    assert not is_data_file("chart-fit.svg")
    assert is_data_file("fit.json")
    assert is_data_file("source-a.csv")
    assert is_data_file("something-new.csv")  # unknown files are kept as data, never mistaken for the page
