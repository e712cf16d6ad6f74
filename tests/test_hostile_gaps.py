"""More of what a hostile data folder must not do (issue 12): a user theme's template that loops for ever, a
CSV path longer than the file system allows, a link out of the folder that every build would try again.

Real folders, the real CLI and the real build in this process; no mocks.
"""

from __future__ import annotations

import json
import os
import time
from collections.abc import Callable
from pathlib import Path

import pytest
from conftest import CliResult, tree_snapshot, write_csv, write_toml

from sitegen.build import BuildOptions, run_build

Cli = Callable[..., CliResult]

#: Ten billion turns of two loops: each range is within the sandbox's own cap on a range's length, so only a
#: time bound ends it (common practice: Jinja2's sandbox caps range() at 100,000 items, not nested loops).
LOOP = "{% for a in range(100000) %}{% for b in range(100000) %}{% endfor %}{% endfor %}"


def _user_template(data: Path, name: str, text: str, seconds: float = 1) -> None:
    write_toml(data / "site.toml", f'theme = "_theme"\n[limits]\nmax_page_seconds = {seconds}\n')
    path = data / "_theme" / "templates" / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")


@pytest.mark.parametrize(("name", "line"), [("index.html", 4), ("changes.html", 3), ("dataset.html", 3)])
def test_a_user_template_that_loops_is_stopped_by_its_time_bound(
    run_cli: Cli, small_data: Path, tmp_path: Path, name: str, line: int
) -> None:
    site = tmp_path / "site"
    assert run_cli("build", small_data, "-o", site, "-q").code == 0
    published = tree_snapshot(site)
    body = "\n" * (line - 3) + LOOP
    _user_template(small_data, name, '{% extends "base.html" %}\n{% block main %}\n' + body + "\n{% endblock %}\n")
    started = time.monotonic()
    res = run_cli("build", small_data, "-o", site)
    assert time.monotonic() - started < 60  # stopped after about 1 s of rendering, not ten billion turns
    assert res.code == 2, res.output
    assert f"theme template {name}, line {line} was stopped after 1 s" in res.output
    assert "max_page_seconds" in res.output
    assert "Traceback" not in res.output
    assert tree_snapshot(site) == published  # the published site is untouched
    assert not (tmp_path / ".site.sitegen-build").exists()  # and no half-built spare stays


def test_the_page_time_bound_is_checked_in_site_toml(run_cli: Cli, small_data: Path, tmp_path: Path) -> None:
    write_toml(small_data / "site.toml", "[limits]\nmax_page_seconds = 0\n")
    res = run_cli("build", small_data, "-o", tmp_path / "site")
    assert res.code == 2
    assert "max_page_seconds" in res.output
    write_toml(small_data / "site.toml", "[limits]\nmax_page_second = 5\n")
    res = run_cli("build", small_data, "-o", tmp_path / "site")
    assert res.code == 2
    assert "did you mean 'max_page_seconds'" in res.output


def test_a_loop_in_a_template_rendered_outside_the_main_thread_is_stopped(small_data: Path, tmp_path: Path) -> None:
    """Outside the main thread there is no timer signal: the sandbox checks the clock at each call."""
    import threading

    from sitegen.errors import SiteConfigError

    _user_template(
        small_data, "index.html", '{% extends "base.html" %}\n{% block main %}\n' + LOOP + "\n{% endblock %}\n"
    )
    caught: list[BaseException] = []

    def build() -> None:
        try:
            run_build(BuildOptions(small_data, tmp_path / "site", jobs=1))
        except BaseException as exc:
            caught.append(exc)

    worker = threading.Thread(target=build)
    worker.start()
    worker.join(timeout=120)
    assert not worker.is_alive()
    assert len(caught) == 1
    assert isinstance(caught[0], SiteConfigError)
    assert "index.html, line 3 was stopped after 1 s" in str(caught[0])


# ---------------------------------------------------------------- a link out of the folder


def test_a_csv_linked_outside_is_not_tried_again_while_the_link_stays(small_data: Path, tmp_path: Path) -> None:
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    write_csv(outside / "private.csv", "x,y\n1,2\n2,4\n3,6.5\n4,8\n")
    (small_data / "leak.csv").symlink_to(outside / "private.csv")
    site = tmp_path / "site"
    first = run_build(BuildOptions(small_data, site, jobs=1))
    assert first.fitted == 4
    assert {o.dataset: o.status for o in first.outcomes}["leak"] == "error"
    entry = next(e for e in json.loads((site / "build.json").read_text("utf-8"))["datasets"] if e["dataset"] == "leak")
    assert entry["failure_kept"] is True  # refused for what the folder holds, not for a passing accident
    again = run_build(BuildOptions(small_data, site, jobs=1))
    assert again.fitted == 0  # the refusal stands while the link stays as it was: nothing is tried again
    assert {o.dataset: o.status for o in again.outcomes}["leak"] == "error"
    # The link made anew to a file inside the folder is noticed: the dataset is read and fitted.
    (small_data / "leak.csv").unlink()
    (small_data / "leak.csv").symlink_to(small_data / "beta.csv")
    third = run_build(BuildOptions(small_data, site, jobs=1))
    assert third.fitted == 1
    assert {o.dataset: o.status for o in third.outcomes}["leak"] == "ok"


# ---------------------------------------------------------------- a path too long


def test_a_csv_whose_path_is_too_long_fails_alone(run_cli: Cli, small_data: Path, tmp_path: Path) -> None:
    """Linux: a path may be at most 4,096 bytes (PATH_MAX), each name at most 255 (NAME_MAX)."""
    deep = small_data / "deep"
    names = ["d" * 200] * 22  # 22 x 201 bytes: deeper than PATH_MAX from the data folder
    fd = os.open(deep.parent, os.O_RDONLY)
    deep.mkdir()
    try:  # made folder by folder, each relative to the one before (no path is ever that long)
        here = os.open(deep, os.O_RDONLY)
        for name in names:
            os.mkdir(name, dir_fd=here)
            nxt = os.open(name, os.O_RDONLY, dir_fd=here)
            os.close(here)
            here = nxt
        with os.fdopen(os.open("long.csv", os.O_WRONLY | os.O_CREAT, 0o644, dir_fd=here), "w") as f:
            f.write("x,y\n1,2\n2,4\n3,6.5\n4,8\n")
        os.close(here)
    finally:
        os.close(fd)
    site = tmp_path / "site"
    res = run_cli("build", small_data, "-o", site)
    assert res.code == 1, res.output
    assert "Traceback" not in res.output
    rows = {r["dataset"]: r for r in json.loads((site / "summary.json").read_text("utf-8"))}
    long = [r for slug, r in rows.items() if slug.startswith("deep-")]
    assert len(long) == 1
    assert long[0]["status"] == "error"
    assert "too long" in str(long[0]["message"])
    assert all(rows[s]["status"] != "error" for s in ("alpha", "beta", "section-gamma"))  # the others still build
