"""A data folder written by someone else must not turn the build against its host (issue 12, items 2 and 3).

Nothing from outside the data folder (or a theme outside its theme folder) is read into the site, whatever
links or paths the folder holds; a theme's templates cannot run code on the building machine; a failing
user template is reported by name and line and leaves no half-built spare behind. Every test builds real
folders with the real CLI in this process.
"""

from __future__ import annotations

import json
import os
import zipfile
from collections.abc import Callable
from pathlib import Path

import pytest
from conftest import CliResult, tree_snapshot, write_csv, write_toml

from sitegen.confine import is_inside

SECRET = "TOP-SECRET-7f3a9c"  # must never appear in anything sitegen writes or prints

Cli = Callable[..., CliResult]


@pytest.fixture
def secret(tmp_path: Path) -> Path:
    """A file outside the data folder that looks like a dataset and a sidecar."""
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    write_csv(outside / "private.csv", f"x,y\n1,2\n2,4\n3,6.5\n4,8\n# {SECRET}\n")
    (outside / "private.toml").write_text(f'title = "{SECRET}"\nmodel = "y ~ x"\n', encoding="utf-8")
    return outside


def _everything(site: Path) -> str:
    """Every byte the site holds, as text, for a search."""
    return "".join(p.read_bytes().decode("utf-8", "replace") for p in site.rglob("*") if p.is_file())


def _summary(site: Path) -> dict[str, dict[str, object]]:
    return {str(r["dataset"]): r for r in json.loads((site / "summary.json").read_text("utf-8"))}


# ---------------------------------------------------------------- item 2: nothing from outside


def test_a_csv_linked_to_a_file_outside_is_refused_unread(
    run_cli: Cli, small_data: Path, secret: Path, tmp_path: Path
) -> None:
    (small_data / "leak.csv").symlink_to(secret / "private.csv")
    site = tmp_path / "site"
    res = run_cli("build", small_data, "-o", site, "-q")
    assert res.code == 1, res.output
    rows = _summary(site)
    assert rows["leak"]["status"] == "error"
    assert "leak.csv leads outside the data folder" in str(rows["leak"]["message"])
    assert all(rows[s]["status"] != "error" for s in ("alpha", "beta", "section-gamma"))  # the others still build
    assert SECRET not in _everything(site)
    assert SECRET not in res.output
    # A link that stays inside the data folder is read like the file itself.
    (small_data / "leak.csv").unlink()
    (small_data / "again.csv").symlink_to(small_data / "beta.csv")
    assert run_cli("build", small_data, "-o", site, "-q").code == 0


def test_a_sidecar_or_site_toml_linked_outside_is_refused_without_quoting_it(
    run_cli: Cli, small_data: Path, secret: Path, tmp_path: Path
) -> None:
    (small_data / "beta.toml").symlink_to(secret / "private.toml")
    site = tmp_path / "site"
    res = run_cli("build", small_data, "-o", site)
    assert res.code == 1, res.output
    msg = str(_summary(site)["beta"]["message"])
    assert "beta.toml leads outside the data folder" in msg
    assert SECRET not in _everything(site)
    assert SECRET not in res.output

    (small_data / "site.toml").symlink_to(secret / "private.toml")
    before = tree_snapshot(site)
    res = run_cli("build", small_data, "-o", site)
    assert res.code == 2
    assert "leads outside the data folder" in res.output
    assert SECRET not in res.output
    assert tree_snapshot(site) == before  # nothing was written


def test_a_link_into_proc_is_refused(run_cli: Cli, small_data: Path, tmp_path: Path) -> None:
    """A hard path of the system (here /proc/self/environ, which holds the build's environment)."""
    os.environ["SITEGEN_TEST_SECRET"] = SECRET
    try:
        (small_data / "env.csv").symlink_to("/proc/self/environ")
        (small_data / "status.csv").symlink_to("/proc/self/status")
        (small_data / "zeros.csv").symlink_to("/dev/zero")  # would never end if read
        (small_data / "gone.csv").symlink_to("/nonexistent/elsewhere.csv")
        site = tmp_path / "site"
        res = run_cli("build", small_data, "-o", site, "-q")
    finally:
        del os.environ["SITEGEN_TEST_SECRET"]
    assert res.code == 1
    rows = _summary(site)
    for name in ("env", "status", "zeros", "gone"):  # each listed, with its own error page
        assert rows[name]["status"] == "error", name
        assert "leads outside the data folder" in str(rows[name]["message"])
    assert "outside the data folder" in str(rows["env"]["message"])
    assert SECRET not in _everything(site)
    assert "VmPeak" not in _everything(site)


def test_offer_source_copies_only_what_was_read(run_cli: Cli, small_data: Path, secret: Path, tmp_path: Path) -> None:
    write_toml(small_data / "site.toml", "offer_source = true\n[limits]\nmax_megabytes = 0.001\n")
    write_csv(small_data / "big.csv", "x,y\n" + "".join(f"{i},{2 * i + 0.1 * (i % 3)}\n" for i in range(200)))
    (small_data / "leak.csv").symlink_to(secret / "private.csv")
    site = tmp_path / "site"
    assert run_cli("build", small_data, "-o", site, "-q").code == 1
    assert (site / "datasets" / "alpha" / "source-alpha.csv").read_bytes() == (small_data / "alpha.csv").read_bytes()
    assert not (site / "datasets" / "big" / "source-big.csv").exists()  # refused for its size: not offered
    assert not (site / "datasets" / "leak" / "source-leak.csv").exists()
    assert SECRET not in _everything(site)


def test_a_theme_outside_the_data_folder_needs_the_command_line(run_cli: Cli, small_data: Path, tmp_path: Path) -> None:
    theme = tmp_path / "my-theme"
    write_csv(theme / "static" / "extra.css", "body { margin: 0 }\n")
    site = tmp_path / "site"
    for choice in ("../my-theme", str(theme), "/etc"):
        write_toml(small_data / "site.toml", {"theme": choice})
        res = run_cli("build", small_data, "-o", site)
        assert res.code == 2, choice
        assert "lies outside the data folder" in res.output
        assert "--theme" in res.output
        assert not site.exists()
    (small_data / "site.toml").unlink()
    (theme / "static" / "extra.js").write_text("/* a script of a theme the user trusts */\n", encoding="utf-8")
    res = run_cli("build", small_data, "-o", site, "--theme", theme, "-q")
    assert res.code == 0, res.output
    assert (site / "assets" / "extra.css").is_file()
    assert (site / "assets" / "extra.js").is_file()  # named on the command line: trusted with scripts too


def test_theme_files_linked_out_of_the_theme_are_not_used(
    run_cli: Cli, small_data: Path, secret: Path, tmp_path: Path
) -> None:
    theme = small_data / "_theme"
    (theme / "static").mkdir(parents=True)
    (theme / "static" / "leak.css").symlink_to(secret / "private.csv")
    (theme / "static" / "ok.css").write_text("p { color: #222 }\n", encoding="utf-8")
    write_toml(small_data / "site.toml", {"theme": "_theme"})
    site = tmp_path / "site"
    assert run_cli("build", small_data, "-o", site, "-q").code == 0
    assert (site / "assets" / "ok.css").is_file()
    assert not (site / "assets" / "leak.css").exists()
    (theme / "templates").mkdir()
    (theme / "templates" / "index.html").symlink_to(secret / "private.csv")
    res = run_cli("build", small_data, "-o", site)
    assert res.code == 2
    assert "index.html leads outside the theme folder" in res.output
    assert SECRET not in _everything(site)
    assert SECRET not in res.output


def test_pack_never_follows_a_link_out_of_the_site(
    run_cli: Cli, small_data: Path, secret: Path, tmp_path: Path
) -> None:
    site = tmp_path / "site"
    assert run_cli("build", small_data, "-o", site, "-q").code == 0
    (site / "datasets" / "alpha" / "planted.csv").symlink_to(secret / "private.csv")
    (site / "planted-folder").symlink_to(secret, target_is_directory=True)
    target = tmp_path / "site.zip"
    assert run_cli("pack", site, "-o", target).code == 0
    with zipfile.ZipFile(target) as zf:
        names = zf.namelist()
        assert not any("planted" in n for n in names)
        assert all(SECRET.encode() not in zf.read(n) for n in names)
    (site / "assets" / "style.css").unlink()
    (site / "assets" / "style.css").symlink_to(secret / "private.csv")
    res = run_cli("pack", site, "-o", tmp_path / "one.html")
    assert res.code == 2
    assert "leads outside the site folder" in res.output
    assert not (tmp_path / "one.html").exists()


def test_the_build_lock_never_follows_a_link(run_cli: Cli, small_data: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    victim = tmp_path / "victim.txt"
    (tmp_path / ".site.sitegen-build.lock").symlink_to(victim)
    res = run_cli("build", small_data, "-o", site)
    assert res.code == 2
    assert "symbolic link" in res.output
    assert not victim.exists()  # the link's target was neither created nor locked
    assert not site.exists()


# ---------------------------------------------------------------- item 3: themes cannot run code


def _user_template(data: Path, name: str, text: str) -> None:
    write_toml(data / "site.toml", {"theme": "_theme"})
    path = data / "_theme" / "templates" / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")


@pytest.mark.parametrize(
    ("expression", "why"),
    [
        ("''.__class__.__mro__[1].__subclasses__()", "unsafe"),  # reaching Python's classes
        ("self._TemplateReference__context.environment.globals", "unsafe"),
        ("cycler.__init__.__globals__.os.popen('touch PWNED').read()", "unsafe"),
        ("range(10 ** 9) | list | length", "range too big"),
        ("10 ** (10 ** 10)", "power this large"),
        ("'x' * 10 ** 9", "repeating text"),
    ],
)
def test_a_user_template_cannot_run_code(
    run_cli: Cli, small_data: Path, tmp_path: Path, expression: str, why: str
) -> None:
    text = '{% extends "base.html" %}\n{% block main %}\n{{ ' + expression + " }}\n{% endblock %}\n"
    _user_template(small_data, "index.html", text)
    site = tmp_path / "site"
    res = run_cli("build", small_data, "-o", site)
    assert res.code == 2, res.output
    assert "index.html, line 3" in res.output
    assert why in res.output.lower()
    assert not site.exists()
    assert not (tmp_path / ".site.sitegen-build").exists()  # no half-built spare
    assert not (Path.cwd() / "PWNED").exists()


def test_a_failing_user_template_names_file_and_line_and_leaves_the_site_alone(
    run_cli: Cli, small_data: Path, tmp_path: Path
) -> None:
    site = tmp_path / "site"
    assert run_cli("build", small_data, "-o", site, "-q").code == 0
    published = tree_snapshot(site)
    # A runtime error, only found as a dataset page renders (in the worker that fits it).
    _user_template(
        small_data, "dataset.html", '{% extends "base.html" %}\n{% block main %}\n\n{{ 1 / 0 }}\n{% endblock %}\n'
    )
    res = run_cli("build", small_data, "-o", site)
    assert res.code == 2, res.output
    assert "dataset.html, line 4" in res.output
    assert "ZeroDivisionError" in res.output
    assert tree_snapshot(site) == published
    assert not (tmp_path / ".site.sitegen-build").exists()
    # A syntax error is found before anything is touched.
    _user_template(small_data, "dataset.html", "{% extends 'base.html' %}\n{% block main %}\n{% if %}\n")
    res = run_cli("build", small_data, "-o", site)
    assert res.code == 2
    assert "dataset.html, line 3" in res.output
    assert tree_snapshot(site) == published
    # Fixed, the next build succeeds.
    (small_data / "_theme" / "templates" / "dataset.html").unlink()
    assert run_cli("build", small_data, "-o", site, "-q").code == 0


def test_a_sandboxed_theme_still_makes_the_same_pages(run_cli: Cli, small_data: Path, tmp_path: Path) -> None:
    """A user theme that overrides a template with the default's own text renders the same page in the sandbox."""
    plain = tmp_path / "plain"
    assert run_cli("build", small_data, "-o", plain, "-q").code == 0
    default = Path(__file__).resolve().parents[1] / "themes" / "default" / "templates"
    _user_template(small_data, "dataset.html", (default / "dataset.html").read_text("utf-8"))
    boxed = tmp_path / "boxed"
    assert run_cli("build", small_data, "-o", boxed, "-q").code == 0
    page = "datasets/alpha/index.html"
    assert (boxed / page).read_text("utf-8") == (plain / page).read_text("utf-8")


def test_is_inside_agrees_with_resolving_both_paths(tmp_path: Path) -> None:
    """confine.is_inside answers a path written below its folder through plain names with an lstat of each
    name, and resolves the paths otherwise; the answer must be the one ``os.path.realpath`` of both gives
    (the reference computed here), for plain names, links in and out, a linked folder, ``..``, a missing
    file, the folder itself and a folder reached through a link."""
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    (outside / "secret.csv").write_text("x,y\n", encoding="utf-8")
    data = tmp_path / "data"
    (data / "sub").mkdir(parents=True)
    (data / "sub" / "a.csv").write_text("x,y\n", encoding="utf-8")
    (data / "in_link.csv").symlink_to(data / "sub" / "a.csv")
    (data / "out_link.csv").symlink_to(outside / "secret.csv")
    (data / "out_dir").symlink_to(outside)
    (data / "in_dir").symlink_to(data / "sub")
    (tmp_path / "data_link").symlink_to(data)
    paths = [
        data / "sub" / "a.csv",
        data / "in_link.csv",
        data / "out_link.csv",
        data / "out_dir" / "secret.csv",
        data / "in_dir" / "a.csv",
        data / "sub" / ".." / ".." / "elsewhere" / "secret.csv",
        data / "sub" / "gone.csv",
        data,
        outside / "secret.csv",
    ]

    def reference(path: Path, root: Path) -> bool:
        real, top = os.path.realpath(path), os.path.realpath(root)
        return real == top or real.startswith(top + os.sep)

    for root in (data, tmp_path / "data_link"):
        for path in paths:
            for written in (path, root / path.relative_to(data) if path.is_relative_to(data) else path):
                assert is_inside(written, root) == reference(written, root), (written, root)
                assert is_inside(str(written), str(root)) == reference(written, root), (written, root)
    assert not is_inside(data / "out_link.csv", data)
    assert not is_inside(data / "sub" / ".." / ".." / "elsewhere" / "secret.csv", data)
    assert is_inside(data / "in_dir" / "a.csv", data)
