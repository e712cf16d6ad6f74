"""The spare: the previous site kept beside the output folder and updated in place by the next build.

What must hold (publish.py's promise): a rebuild through the spare gives exactly the
site a fresh build into an empty folder gives; the published site and the spare never
share a file; a damaged, doctored or half-updated spare only means more work.
Everything runs for real: real folders, real builds, a real SIGKILL.
"""

from __future__ import annotations

import os
import re
import shutil
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest
from conftest import cli, site_bytes, write_csv, write_toml

from sitegen.publish import build_dir_for

# Files that record the sequence of builds rather than the data: they differ from a fresh build on purpose.
SEQUENCE_FILES = ("build.json", "history.json", "changes.json", "changes.html")


def _build(data: Path, site: Path, *extra: str) -> None:
    res = cli("build", data, "-o", site, "-j", "1", *extra)
    assert res.code == 0, res.output


def _fresh(data: Path, where: Path) -> dict[str, bytes]:
    _build(data, where)
    return site_bytes(where, SEQUENCE_FILES)


def _images_alike(files: dict[str, bytes]) -> dict[str, bytes]:
    """Chart images with their clip-path ids blanked: the converter numbers them per process, not per chart."""
    return {k: re.sub(rb"clip\d+", b"clip", v) if k.endswith(".svg") else v for k, v in files.items()}


def _inodes(folder: Path) -> dict[int, str]:
    return {p.stat().st_ino: p.as_posix() for p in folder.rglob("*") if p.is_file()}


def _assert_independent(site: Path) -> None:
    """Every file of the site is its own: one link, and no inode shared with the spare."""
    for p in site.rglob("*"):
        if p.is_file():
            assert p.stat().st_nlink == 1, p
    spare = build_dir_for(site)
    if spare.exists():
        assert not set(_inodes(site)) & set(_inodes(spare))


def _append(path: Path, text: str) -> None:
    with path.open("a", encoding="utf-8") as fh:
        fh.write(text)


def _data(root: Path) -> Path:
    data = root / "data"
    for i, slope in enumerate((0.5, 1.5, -0.8, 2.2)):
        rows = "".join(f"{x},{1 + slope * x + ((x * 3 + i) % 5 - 2) * 0.07:.3f}\n" for x in range(1, 13))
        write_csv(data / ("part" if i == 3 else "") / f"line_{i}.csv", "x,y\n" + rows)
    write_toml(data / "line_1.toml", {"title": "Line one", "model": "y ~ x"})
    return data


STEPS: list[tuple[str, Callable[[Path], object]]] = [
    ("append a row", lambda d: _append(d / "line_0.csv", "13,7.61\n")),
    ("add a dataset", lambda d: write_csv(d / "line_9.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n")),
    ("retitle (neighbours' pages change)", lambda d: write_toml(d / "line_1.toml", {"title": "Line 1 (renamed)"})),
    ("remove a dataset", lambda d: (d / "line_2.csv").unlink()),
    ("offer the source files", lambda d: write_toml(d / "site.toml", "offer_source = true\n")),
    ("nothing", lambda d: None),
    ("stop offering them", lambda d: (d / "site.toml").unlink()),
    ("break one dataset", lambda d: write_csv(d / "line_0.csv", "x,y\n1,a\n")),
    ("mend it", lambda d: write_csv(d / "line_0.csv", "x,y\n1,2\n2,3.1\n3,3.9\n4,5.2\n")),
]


def test_a_first_build_and_a_build_with_nothing_to_do_leave_nothing_beside(tmp_path: Path) -> None:
    data = _data(tmp_path)
    site = tmp_path / "site"
    _build(data, site)
    _build(data, site)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data", "site"]


def test_a_marker_replaced_by_a_link_is_written_again(tmp_path: Path) -> None:
    """The site's marker is sitegen's own plain file: a link in its place (to any file) is replaced, even
    by a rebuild that otherwise has nothing to do."""
    from sitegen.publish import MARKER, MARKER_TEXT

    data = _data(tmp_path)
    site = tmp_path / "site"
    _build(data, site)
    elsewhere = tmp_path / "elsewhere.txt"
    elsewhere.write_text(MARKER_TEXT, encoding="utf-8")
    (site / MARKER).unlink()
    (site / MARKER).symlink_to(elsewhere)
    _build(data, site)
    assert not (site / MARKER).is_symlink()
    assert (site / MARKER).read_text(encoding="utf-8") == MARKER_TEXT
    assert elsewhere.read_text(encoding="utf-8") == MARKER_TEXT


def test_every_rebuild_equals_a_fresh_build(tmp_path: Path) -> None:
    data = _data(tmp_path)
    site = tmp_path / "site"
    _build(data, site)
    for k, (what, change) in enumerate(STEPS):
        change(data)
        res = cli("build", data, "-o", site, "-j", "1")
        assert res.code in (0, 1), res.output
        fresh = tmp_path / f"fresh-{k}"
        cli("build", data, "-o", fresh, "-j", "1")
        assert site_bytes(site, SEQUENCE_FILES) == site_bytes(fresh, SEQUENCE_FILES), what
        _assert_independent(site)
    assert build_dir_for(site).is_dir()  # kept for the next build


def test_static_images_come_and_go_with_the_setting(tmp_path: Path) -> None:
    data = _data(tmp_path)
    site = tmp_path / "site"
    _build(data, site)
    _build(data, site)  # now a spare exists
    write_toml(data / "site.toml", "static_images = true\n")
    _build(data, site)
    assert list((site / "datasets" / "line-0").glob("chart-*.svg"))
    assert _images_alike(site_bytes(site, SEQUENCE_FILES)) == _images_alike(_fresh(data, tmp_path / "fresh-on"))
    (data / "site.toml").unlink()
    _build(data, site)
    _build(data, site)  # and through the spare that held the images
    assert not list(site.rglob("chart-*.svg"))
    assert site_bytes(site, SEQUENCE_FILES) == _fresh(data, tmp_path / "fresh-off")
    _assert_independent(site)


def _site_and_spare(tmp_path: Path) -> tuple[Path, Path, Path]:
    """The example data built twice: a published site and its spare (data, site, spare)."""
    data = _data(tmp_path)
    site = tmp_path / "site"
    _build(data, site)
    _build(data, site, "--refit")
    return data, site, build_dir_for(site)


def test_unchanged_datasets_are_left_in_place(tmp_path: Path) -> None:
    """Two builds after a change, an unchanged dataset's files are the very ones the spare held."""
    data, site, spare = _site_and_spare(tmp_path)
    before = {p.name: p.stat().st_ino for p in (spare / "datasets" / "part-line-3").iterdir()}
    _append(data / "line_0.csv", "13,7.61\n")
    _build(data, site)
    after = {p.name: p.stat().st_ino for p in (site / "datasets" / "part-line-3").iterdir()}
    assert after == before


def test_a_doctored_spare_costs_work_not_correctness(tmp_path: Path) -> None:
    data, site, spare = _site_and_spare(tmp_path)
    outside = tmp_path / "keep-me.txt"
    outside.write_text("precious\n", encoding="utf-8")
    # A file edited at the same size, one deleted, a stray file and folder, a hard link to a file
    # elsewhere where a download belongs, a symbolic link where a dataset folder belongs.
    fit = spare / "datasets" / "line-0" / "fit.json"
    text = fit.read_text(encoding="utf-8")
    fit.write_text(text.replace('"ok"', '"ko"', 1), encoding="utf-8")
    (spare / "datasets" / "line-1" / "coefficients.csv").unlink()
    (spare / "stray.txt").write_text("x", encoding="utf-8")
    (spare / "datasets" / "line-1" / "junk").mkdir()
    (spare / "datasets" / "line-2" / "anova.csv").unlink()
    os.link(outside, spare / "datasets" / "line-2" / "anova.csv")
    target = spare / "datasets" / "part-line-3"
    shutil.rmtree(target)
    target.symlink_to(tmp_path)
    _append(data / "line_0.csv", "13,7.61\n")  # a change, so that the build goes through the spare
    _build(data, site)
    assert outside.read_text(encoding="utf-8") == "precious\n"
    assert site_bytes(site, SEQUENCE_FILES) == _fresh(data, tmp_path / "fresh")
    _assert_independent(site)


@pytest.mark.slow
def test_a_build_killed_while_updating_the_spare(tmp_path: Path) -> None:
    data = _data(tmp_path)
    for i in range(12):
        rows = "".join(f"{x},{2 + 0.3 * x + (x * i % 7) * 0.05:.3f}\n" for x in range(1, 40))
        write_csv(data / f"more_{i:02d}.csv", "x,y\n" + rows)
    site = tmp_path / "site"
    _build(data, site)
    _build(data, site)
    cmd = [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(site), "--refit", "-q", "-j", "2"]
    for delay in (0.2, 0.6, 1.2):
        proc = subprocess.Popen(cmd, start_new_session=True)
        time.sleep(delay)
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
        _build(data, site)
        assert site_bytes(site, SEQUENCE_FILES) == _fresh(data, tmp_path / f"fresh-{delay}")


def test_a_reader_of_an_earlier_site_keeps_reading_what_it_opened(tmp_path: Path) -> None:
    """A download or copy in progress across rebuilds gets the file it opened, whole: files of the spare
    are replaced by new files, never rewritten in place."""
    data = _data(tmp_path)
    site = tmp_path / "site"
    _build(data, site)
    path = site / "datasets" / "line-0" / "observations.csv"
    expected = path.read_bytes()
    with path.open("rb") as reader:
        first = reader.read(10)
        for k in range(3):  # the opened site becomes the spare, then is brought up to date twice
            _append(data / "line_0.csv", f"{20 + k},{9 + k}.5\n")
            _append(data / "part" / "line_3.csv", f"{20 + k},{40 + k}.5\n")
            _build(data, site)
        assert first + reader.read() == expected


def _spare_doctored_then_rebuilt(tmp_path: Path, rel: str, doctor: Callable[[bytes], bytes]) -> None:
    """Build twice (the spare then holds the first site), change one of the spare's files at the same size,
    change the data, build again: the site must be what a fresh build gives."""
    data = _data(tmp_path)
    site = tmp_path / "site"
    _build(data, site)
    _append(data / "line_0.csv", "13,7.61\n")
    _build(data, site)
    target = build_dir_for(site) / rel
    text = target.read_bytes()
    target.write_bytes(doctor(text))
    assert len(target.read_bytes()) == len(text)
    _append(data / "line_0.csv", "14,8.2\n")
    _build(data, site)
    assert site_bytes(site, SEQUENCE_FILES) == _fresh(data, tmp_path / "fresh")


def test_a_same_size_edit_in_the_spare_is_not_published(tmp_path: Path) -> None:
    def one_digit_changed(text: bytes) -> bytes:
        digit = next(c for c in b"0123456789" if bytes([c]) in text.split(b"\n", 1)[1])
        return text.replace(bytes([digit]), b"9" if digit != ord("9") else b"8", 1)

    _spare_doctored_then_rebuilt(tmp_path, "datasets/line-1/coefficients.csv", one_digit_changed)


def test_a_page_is_copied_from_the_published_site_only_when_that_folder_is_as_recorded(tmp_path: Path) -> None:
    """A dataset kept from the spare whose page must change: its published page is not trusted unchecked."""
    data = _data(tmp_path)
    write_toml(data / "site.toml", "static_images = true\n")
    site = tmp_path / "site"
    outside = tmp_path / "outside.html"
    outside.write_text("not a page of this site", encoding="utf-8")
    _build(data, site)
    write_csv(data / "line_1a.csv", "x,y\n1,2\n2,4.1\n3,5.9\n4,8.2\n")  # line-1's next neighbour changes
    _build(data, site)
    published = site / "datasets" / "line-1"
    next(published.glob("chart-*.svg")).unlink()
    (published / "index.html").unlink()
    (published / "index.html").symlink_to(outside)
    _append(data / "line_0.csv", "13,7.61\n")
    _build(data, site)
    assert outside.read_text(encoding="utf-8") == "not a page of this site"
    page = site / "datasets" / "line-1" / "index.html"
    assert not page.is_symlink()
    assert "not a page of this site" not in page.read_text(encoding="utf-8")
    assert _images_alike(site_bytes(site, SEQUENCE_FILES)) == _images_alike(_fresh(data, tmp_path / "fresh"))


def test_folders_a_theme_no_longer_has_leave_the_site(tmp_path: Path) -> None:
    data = _data(tmp_path)
    theme = data / "_brand"
    (theme / "static" / "img").mkdir(parents=True)
    (theme / "static" / "img" / "logo.svg").write_text("<svg xmlns='http://www.w3.org/2000/svg'/>", "utf-8")
    write_toml(data / "site.toml", 'theme = "_brand"\n')
    site = tmp_path / "site"
    _build(data, site)
    assert (site / "assets" / "img" / "logo.svg").is_file()
    shutil.rmtree(theme / "static" / "img")
    _build(data, site)
    _append(data / "line_0.csv", "13,7.61\n")  # a change: the next build goes through the spare, which had the folder
    _build(data, site)
    assert not (site / "assets" / "img").exists()
    assert site_bytes(site, SEQUENCE_FILES) == _fresh(data, tmp_path / "fresh")


def test_pages_rendered_by_workers_after_the_chart_converter_ran_here_do_not_hang(tmp_path: Path) -> None:
    """Static images: one dataset refitted in the build's own process (which runs the chart converter and
    its threads there), then two pages rendered by a pool of workers. Forked, those workers would wait
    for ever on a lock of the converter's threads; they must start afresh and finish."""
    data = tmp_path / "data"
    for name, slope in (("a", 0.5), ("b", 1.5), ("c", 2.5)):
        rows = "".join(f"{i},{1 + slope * i + ((i * 7) % 5 - 2) * 0.05:.4f}\n" for i in range(1, 11))
        write_csv(data / f"{name}.csv", "x,y\n" + rows)
    write_toml(data / "site.toml", "static_images = true\n")
    site = tmp_path / "site"
    cmd = [sys.executable, "-m", "sitegen", "build", str(data), "-o", str(site), "-j", "2", "-q"]
    subprocess.run(cmd, check=True, timeout=120)
    write_toml(data / "b.toml", {"title": "B renamed"})  # b refits alone; a's and c's pages change
    done = subprocess.run(cmd, check=False, timeout=120, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert "B renamed" in (site / "datasets" / "a" / "index.html").read_text(encoding="utf-8")


def test_the_chart_bundle_is_the_cached_one_byte_for_byte(tmp_path: Path) -> None:
    _spare_doctored_then_rebuilt(
        tmp_path, "assets/vendor/vega-bundle.js", lambda text: text[:100] + b"X" * 10 + text[110:]
    )


def test_static_images_for_one_changed_dataset_are_drawn_in_a_worker(tmp_path: Path) -> None:
    """The chart converter never runs in the build's own process (its threads would be inherited by forks)."""
    data = _data(tmp_path)
    write_toml(data / "site.toml", "static_images = true\n")
    site = tmp_path / "site"
    _build(data, site)
    _append(data / "line_0.csv", "13,7.61\n")
    script = (
        "import sys; from pathlib import Path; from sitegen.build import BuildOptions, run_build; "
        f"s = run_build(BuildOptions(Path({str(data)!r}), Path({str(site)!r}), jobs=2)); "
        "print(s.fitted, 'vl_convert' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True, timeout=120)
    assert out.stdout.split() == ["1", "False"]
    assert list((site / "datasets" / "line-0").glob("chart-*.svg"))
