"""Rebuilding a site: reuse what did not change, refit what did, repair what is damaged.

Contract (DESIGN.md): build.json records per dataset whether it was reused or
refitted; "new data refit only the datasets that changed"; two builds of the
same input are identical apart from build.json. build.py's own promise: a
missing or corrupt previous site only means more work, never an error.

The change report (changes.html) is read through the section ids of the default
theme's template (h-refit, h-new, h-removed).
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import re
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
from conftest import LINE_CSV, Built, cli, site_bytes, write_csv, write_toml

from sitegen.build import BuildOptions, run_build

SLUGS = ["alpha", "beta", "section-gamma"]


def build(data: Path, site: Path, *extra: str) -> int:
    result = cli("build", data, "-o", site, "-j", "1", *extra)
    assert "Traceback" not in result.output
    return result.code


def build_json(site: Path) -> dict[str, Any]:
    body = json.loads((site / "build.json").read_text(encoding="utf-8"))
    assert isinstance(body, dict)
    return body


def reused(site: Path) -> dict[str, bool]:
    return {e["dataset"]: e["reused"] for e in build_json(site)["datasets"]}


def summary_slugs(site: Path) -> list[str]:
    with (site / "summary.csv").open(newline="", encoding="utf-8") as f:
        return [r["dataset"] for r in csv.DictReader(f)]


def summary_status(site: Path) -> dict[str, str]:
    with (site / "summary.csv").open(newline="", encoding="utf-8") as f:
        return {r["dataset"]: r["status"] for r in csv.DictReader(f)}


def change_section(site: Path, section_id: str) -> str | None:
    """The HTML of one section of changes.html, or None when the page has no such section."""
    html = (site / "changes.html").read_text(encoding="utf-8")
    m = re.search(rf'<section aria-labelledby="{section_id}">(.*?)</section>', html, re.S)
    return m.group(1) if m else None


@pytest.fixture
def built(small_data: Path, tmp_path: Path) -> tuple[Path, Path]:
    site = tmp_path / "site"
    assert build(small_data, site) == 0
    assert reused(site) == dict.fromkeys(SLUGS, False)
    return small_data, site


def test_unchanged_input_reuses_everything_and_gives_identical_pages(built: tuple[Path, Path]) -> None:
    data, site = built
    before = site_bytes(site, skip=("build.json",))
    assert build(data, site) == 0
    assert reused(site) == dict.fromkeys(SLUGS, True)
    assert site_bytes(site, skip=("build.json",)) == before


def test_rebuild_with_nothing_to_do_writes_build_json_as_a_full_build_would(built: tuple[Path, Path]) -> None:
    """The second of two no-op rebuilds changes only the build time in the text it had; the file is still the
    canonical text of its content (the json module is the independent reader)."""
    from sitegen.jsontext import json_text

    data, site = built
    assert build(data, site) == 0  # records every dataset as reused
    first = (site / "build.json").read_text(encoding="utf-8")
    assert build(data, site) == 0
    second = (site / "build.json").read_text(encoding="utf-8")
    body = json.loads(second)
    assert second == json_text(body)
    assert {k: v for k, v in body.items() if k != "built_at"} == {
        k: v for k, v in json.loads(first).items() if k != "built_at"
    }
    assert body["built_at"] >= json.loads(first)["built_at"]


def test_unchanged_example_reuses_everything(example_build: Built, tmp_path: Path) -> None:
    """The example site, copied, rebuilt in place: every dataset reused, every other file identical."""
    import shutil

    site = tmp_path / "site"
    shutil.copytree(example_build.site, site)
    before = site_bytes(site, skip=("build.json",))
    assert build(example_build.data, site) == 0
    assert all(reused(site).values())
    assert len(reused(site)) == 15
    assert site_bytes(site, skip=("build.json",)) == before


def test_changed_csv_is_the_only_one_refitted(built: tuple[Path, Path]) -> None:
    data, site = built
    others = {s: (site / "datasets" / s / "fit.json").read_bytes() for s in ("alpha", "section-gamma")}
    new_bytes = b"dose,response\n0,0.10\n1,0.55\n2,0.91\n3,1.30\n4,1.74\n5,2.02\n6,2.49\n"
    (data / "beta.csv").write_bytes(new_bytes)
    assert build(data, site) == 0
    assert reused(site) == {"alpha": True, "beta": False, "section-gamma": True}
    entry = next(e for e in build_json(site)["datasets"] if e["dataset"] == "beta")
    assert entry["input_sha256"] == hashlib.sha256(new_bytes).hexdigest()
    fit = json.loads((site / "datasets" / "beta" / "fit.json").read_text(encoding="utf-8"))
    assert fit["n"] == 7
    for slug, body in others.items():
        assert (site / "datasets" / slug / "fit.json").read_bytes() == body
    refit = change_section(site, "h-refit")
    assert refit is not None, "changes.html lists the refitted dataset"
    assert "datasets/beta/index.html" in refit
    assert "datasets/alpha/" not in refit
    assert "datasets/section-gamma/" not in refit


def test_changed_sidecar_refits_that_dataset(built: tuple[Path, Path]) -> None:
    data, site = built
    write_toml(data / "alpha.toml", {"title": "Alpha line", "model": "y ~ x", "level": 0.9})
    assert build(data, site) == 0
    assert reused(site) == {"alpha": False, "beta": True, "section-gamma": True}
    fit = json.loads((site / "datasets" / "alpha" / "fit.json").read_text(encoding="utf-8"))
    assert fit["level"] == 0.9


def test_changed_site_defaults_refit_every_dataset(built: tuple[Path, Path]) -> None:
    data, site = built
    write_toml(data / "site.toml", "[defaults]\nlevel = 0.99\n")
    assert build(data, site) == 0
    assert reused(site) == dict.fromkeys(SLUGS, False)


@pytest.mark.parametrize("site_toml", ["[limits]\nmax_rows = 1000\n", "offer_source = true\n"])
def test_changed_site_settings_that_shape_results_refit_every_dataset(built: tuple[Path, Path], site_toml: str) -> None:
    """Limits and the offer of the source file are part of every dataset's fingerprint."""
    data, site = built
    write_toml(data / "site.toml", site_toml)
    assert build(data, site) == 0
    assert reused(site) == dict.fromkeys(SLUGS, False)
    assert build(data, site) == 0
    assert reused(site) == dict.fromkeys(SLUGS, True)


def test_renamed_csv_is_fitted_under_its_new_name(built: tuple[Path, Path]) -> None:
    data, site = built
    (data / "beta.csv").rename(data / "beta2.csv")
    assert build(data, site) == 0
    assert reused(site) == {"alpha": True, "beta2": False, "section-gamma": True}


def test_deleted_csv_disappears(built: tuple[Path, Path]) -> None:
    data, site = built
    (data / "beta.csv").unlink()
    assert build(data, site) == 0
    assert not (site / "datasets" / "beta").exists()
    assert summary_slugs(site) == ["alpha", "section-gamma"]
    summary = json.loads((site / "summary.json").read_text(encoding="utf-8"))
    assert [o["dataset"] for o in summary] == ["alpha", "section-gamma"]
    assert [e["dataset"] for e in build_json(site)["datasets"]] == ["alpha", "section-gamma"]
    assert "datasets/beta/" not in (site / "index.html").read_text(encoding="utf-8")
    for page in site.rglob("*.html"):
        if page.name != "changes.html":
            assert "beta/index.html" not in page.read_text(encoding="utf-8"), page
    removed = change_section(site, "h-removed")
    assert removed is not None, "changes.html lists the removed dataset"
    assert "beta" in removed


def test_new_csv_is_listed_as_new(built: tuple[Path, Path]) -> None:
    data, site = built
    write_csv(data / "delta.csv", "p,q\n1,1.9\n2,4.2\n3,5.8\n4,8.1\n5,9.9\n")
    assert build(data, site) == 0
    assert reused(site) == {"alpha": True, "beta": True, "delta": False, "section-gamma": True}
    new = change_section(site, "h-new")
    assert new is not None
    assert "datasets/delta/index.html" in new
    assert "datasets/alpha/" not in new


def test_change_report_of_one_rebuild_lists_new_removed_and_refitted(built: tuple[Path, Path]) -> None:
    data, site = built
    (data / "alpha.csv").write_text("x,y\n1,2.0\n2,4.1\n3,5.9\n4,8.2\n5,9.8\n6,12.1\n7,14.0\n", "utf-8")
    (data / "beta.csv").unlink()
    write_csv(data / "delta.csv", "p,q\n1,1.9\n2,4.2\n3,5.8\n4,8.1\n5,9.9\n")
    assert build(data, site) == 0
    refit, new, removed = (change_section(site, s) for s in ("h-refit", "h-new", "h-removed"))
    assert refit is not None
    assert "datasets/alpha/index.html" in refit
    assert new is not None
    assert "datasets/delta/index.html" in new
    assert removed is not None
    assert "beta" in removed
    assert "section-gamma" not in refit + new + removed


def _stripped(good: bytes) -> bytes:
    """A well-formed fit.json of the right format version that lost its numbers."""
    body = json.loads(good)
    for key in (
        "coefficients",
        "n",
        "df_model",
        "df_resid",
        "r_squared",
        "adj_r_squared",
        "residual_std_error",
        "f_stat",
        "f_p_value",
        "anova",
        "chart",
        "diagnostics",
    ):
        body.pop(key, None)
    return json.dumps(body).encode()


DAMAGES = [
    pytest.param(lambda good: b"{not json", id="garbage"),
    pytest.param(lambda good: b"", id="empty"),
    pytest.param(lambda good: b"{}\n", id="empty-object"),
    pytest.param(lambda good: good[: len(good) // 2], id="truncated"),
    pytest.param(_stripped, id="numbers-missing"),
    pytest.param(lambda good: None, id="deleted"),
]


@pytest.mark.parametrize("damage", DAMAGES)
@pytest.mark.parametrize("other_change", [False, True], ids=["nothing-else-changed", "another-csv-changed"])
def test_corrupt_previous_fit_json_is_refitted_without_error(
    built: tuple[Path, Path], damage: Callable[[bytes], bytes | None], other_change: bool
) -> None:
    data, site = built
    target = site / "datasets" / "alpha" / "fit.json"
    good = target.read_bytes()
    bad = damage(good)
    if bad is None:
        target.unlink()
    else:
        target.write_bytes(bad)
    if other_change:
        (data / "beta.csv").write_text("dose,response\n0,0.1\n1,0.5\n2,0.9\n3,1.3\n4,1.7\n", "utf-8")
    result = cli("build", data, "-o", site, "-j", "1")
    assert result.code == 0, result.output
    assert "Traceback" not in result.output
    assert reused(site) == {"alpha": False, "beta": not other_change, "section-gamma": True}
    assert target.read_bytes() == good


def test_fit_json_rewritten_in_place_with_its_time_set_back_is_fitted_again(built: tuple[Path, Path]) -> None:
    """Same size, same modification time, same inode: the change time still tells, and the stored result is
    not trusted (a neighbour's page would otherwise be rendered from it later)."""
    data, site = built
    path = site / "datasets" / "alpha" / "fit.json"
    st = path.stat()
    good = path.read_bytes()
    with path.open("r+b") as fh:  # in place: the inode stays
        fh.write(b"#" * len(good))
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert build(data, site) == 0
    assert reused(site) == {"alpha": False, "beta": True, "section-gamma": True}
    assert json.loads(path.read_text(encoding="utf-8"))["dataset"] == "alpha"
    write_toml(data / "beta.toml", {"title": "Beta renamed"})  # alpha's page names its neighbour
    assert build(data, site) == 0


@pytest.mark.parametrize(
    "name",
    [
        "summary.csv",
        "summary.json",
        "index.html",
        "assets/style.css",
        "datasets/beta/observations.csv",
        "datasets/beta/coefficients.csv",
        "datasets/beta/index.html",
    ],
)
def test_deleted_site_files_are_restored(built: tuple[Path, Path], name: str) -> None:
    """A missing file of the previous site only means more work (build.py's promise)."""
    data, site = built
    expected = site_bytes(site, skip=("build.json",))
    (site / name).unlink()
    assert build(data, site) == 0
    assert site_bytes(site, skip=("build.json",)) == expected


def test_corrupt_previous_build_json_means_a_full_build(built: tuple[Path, Path]) -> None:
    data, site = built
    (site / "build.json").write_text("[1, 2", encoding="utf-8")
    assert build(data, site) == 0
    assert reused(site) == dict.fromkeys(SLUGS, False)


def test_refit_option_refits_everything(built: tuple[Path, Path]) -> None:
    data, site = built
    before = site_bytes(site, skip=("build.json",))
    assert build(data, site, "--refit") == 0
    assert reused(site) == dict.fromkeys(SLUGS, False)
    assert site_bytes(site, skip=("build.json",)) == before


def test_failed_dataset_keeps_failing_until_mended(built: tuple[Path, Path]) -> None:
    """Keyed on content: the same input fails the same way, so an unchanged failure is reused (and still
    reported, with exit status 1); a mended file is fitted."""
    data, site = built
    write_csv(data / "broken.csv", "x,y\n1,2\n2,oops\n3,4\n4,5\n")
    write_toml(data / "broken.toml", {"model": "y ~ x"})
    assert build(data, site) == 1
    first = cli("build", data, "-o", site, "-j", "1")
    assert first.code == 1, "an error is never reused as a success"
    assert "broken.csv" in first.stream
    assert "oops" in first.stream
    assert reused(site)["broken"] is True
    assert summary_status(site)["broken"] == "error"
    (data / "alpha.csv").write_text(LINE_CSV + "9,19.2\n", encoding="utf-8")  # another change: not a no-op
    assert build(data, site) == 1
    assert reused(site)["broken"] is True
    assert summary_status(site)["broken"] == "error"
    write_csv(data / "broken.csv", "x,y\n1,2\n2,3.1\n3,4\n4,5.2\n")
    assert build(data, site) == 0
    fit = json.loads((site / "datasets" / "broken" / "fit.json").read_text(encoding="utf-8"))
    assert fit["status"] in ("ok", "warn")


def test_a_rebuild_that_fits_one_dataset_loads_no_chart_converter(built: tuple[Path, Path]) -> None:
    """The chart converter's native library is loaded only to make the bundle or images, not to learn its
    versions again (they are remembered per installed version)."""
    data, site = built
    write_csv(data / "beta.csv", "dose,response\n0,0.12\n1,0.52\n2,0.87\n3,1.33\n4,1.71\n5,2.08\n")
    script = (
        "import sys; from pathlib import Path; from sitegen.build import BuildOptions, run_build; "
        f"s = run_build(BuildOptions(Path({str(data)!r}), Path({str(site)!r}), jobs=1)); "
        "print(s.fitted, 'vl_convert' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["1", "False"]


class _Meddling:
    """An executor (the build's seam for running work) that does something to one dataset's file while
    that dataset is being fitted, then puts the file back: what a sync tool or an editor can do."""

    def __init__(self, slug: str, meddle: Callable[[Path], Callable[[], None]]) -> None:
        self.slug, self.meddle = slug, meddle

    def run(self, fn: Callable[[Any], Any], items: list[Any], bounded: Any = None) -> Any:
        def one(item: Any) -> Any:
            src = getattr(item, "source", None)
            if src is None or src.slug != self.slug:
                return fn(item)
            restore = self.meddle(src.csv_path)
            try:
                return fn(item)
            finally:
                restore()

        return ((i, one(item)) for i, item in enumerate(items))

    def __enter__(self) -> _Meddling:
        return self

    def __exit__(self, *exc: object) -> None:
        return None


def _away(path: Path) -> Callable[[], None]:
    hidden = path.with_name("away.tmp")
    path.rename(hidden)

    def back() -> None:
        hidden.rename(path)

    return back


def _garbled(path: Path) -> Callable[[], None]:
    good = path.read_bytes()
    path.write_bytes(b"x,y\n1,oops\n")

    def back() -> None:
        path.write_bytes(good)

    return back


@pytest.mark.parametrize("meddle", [_away, _garbled], ids=["file away for a moment", "file garbled for a moment"])
def test_a_failure_the_input_did_not_cause_is_tried_again(
    built: tuple[Path, Path], meddle: Callable[[Path], Callable[[], None]]
) -> None:
    data, site = built
    write_csv(data / "beta.csv", "dose,response\n0,0.12\n1,0.52\n2,0.87\n3,1.33\n4,1.71\n5,2.08\n")
    options = BuildOptions(data, site, jobs=1)
    during = run_build(options, executor=_Meddling("beta", meddle))
    assert {o.dataset: o.status for o in during.outcomes}["beta"] == "error"
    after = run_build(options)  # the file is back as it was when the build began
    assert {o.dataset: o.status for o in after.outcomes}["beta"] == "ok"
    assert reused(site)["beta"] is False


def _sidecar_garbled(path: Path) -> Callable[[], None]:
    sidecar = path.with_suffix(".toml")
    good = sidecar.read_bytes()
    sidecar.write_bytes(b"title = [unclosed\n")

    def back() -> None:
        sidecar.write_bytes(good)

    return back


def test_a_sidecar_garbled_for_a_moment_is_tried_again(built: tuple[Path, Path]) -> None:
    data, site = built
    write_csv(data / "alpha.csv", LINE_CSV + "7,14.2\n")
    options = BuildOptions(data, site, jobs=1)
    during = run_build(options, executor=_Meddling("alpha", _sidecar_garbled))
    assert {o.dataset: o.status for o in during.outcomes}["alpha"] == "error"
    after = run_build(options)
    assert {o.dataset: o.status for o in after.outcomes}["alpha"] == "ok"


def test_a_file_that_is_not_text_fails_once_and_then_costs_nothing(built: tuple[Path, Path]) -> None:
    """A failure the input decides (here a CSV holding NUL bytes) is kept: the next build has nothing to do."""
    data, site = built
    (data / "binary.csv").write_bytes(b"x,y\n1,\x002\n")
    assert build(data, site) == 1
    page = site / "datasets" / "binary" / "index.html"
    before = page.stat().st_ino
    again = cli("build", data, "-o", site, "-j", "1")
    assert again.code == 1
    assert "0 fitted" in again.stream
    assert page.stat().st_ino == before  # nothing was rewritten
    assert next(e for e in build_json(site)["datasets"] if e["dataset"] == "binary")["failure_kept"] is True
