"""Orchestrate a build: discover → fit (or reuse) → render → publish.

Data flows one way. The previous site is read only for what it can save:
stored results whose fingerprint still matches (no refit), pages whose inputs
did not change (no re-render), the chart bundle, and the history of estimates.
A missing or corrupt previous site only means more work, never an error.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path
from typing import Any

from sitegen import __version__
from sitegen.analyze import DatasetResult, FitTask, analyze
from sitegen.discover import SITE_CONFIG_NAME, DatasetSource, discover
from sitegen.executor import Executor, make_executor
from sitegen.model import FitReport, from_json, to_json
from sitegen.publish import build_folder, check_output_folder, swap_in
from sitegen.report import assets, history, pages
from sitegen.report.files import dataset_files, summary_files
from sitegen.report.tags import tag_blocks
from sitegen.report.theme import load_theme
from sitegen.spec import SiteConfig, read_site_config

LIBRARIES = ("numpy", "scipy", "pandas", "patsy", "statsmodels")
RENDER_LIBRARIES = ("altair", "jinja2", "markdown-it-py", "vl-convert-python", "openpyxl")
Progress = Callable[[int, int, str], None]


@dataclass(frozen=True, slots=True)
class BuildOptions:
    """What the user asked for."""

    data_dir: Path
    out_dir: Path
    jobs: int | None = None
    refit: bool = False


@dataclass(frozen=True, slots=True)
class BuildSummary:
    """What a build did, for the CLI's closing line and exit status."""

    out_dir: Path
    reports: tuple[FitReport, ...]
    fitted: int
    reused: int
    seconds: float
    warnings: tuple[str, ...] = ()
    debug_traces: tuple[tuple[str, str], ...] = field(default=())

    @property
    def errors(self) -> int:
        return sum(1 for r in self.reports if r.status == "error")

    @property
    def warned(self) -> int:
        return sum(1 for r in self.reports if r.status == "warn")


def library_versions(names: Sequence[str]) -> dict[str, str]:
    """Installed versions of the named distributions."""
    out = {}
    for name in names:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "unknown"
    return out


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _fingerprint(src: DatasetSource, config: SiteConfig, versions: dict[str, str]) -> tuple[str, str]:
    """(input sha256, fingerprint of everything that shapes the dataset's numbers)."""
    try:
        csv_sha = _sha256(src.csv_path.read_bytes())
    except OSError:
        return "", ""
    sidecar = b""
    if src.sidecar_path is not None:
        try:
            sidecar = src.sidecar_path.read_bytes()
        except OSError:
            sidecar = b"<unreadable>"
    payload = json.dumps(
        {
            "csv": csv_sha,
            "sidecar": _sha256(sidecar),
            "defaults": [[k, v] for k, v in config.defaults],
            "limits": [config.limits.max_megabytes, config.limits.max_rows, config.limits.max_columns],
            "path": [src.relpath, src.slug, src.section],
            "sitegen": __version__,
            "libraries": versions,
        },
        sort_keys=True,
        default=str,
    )
    return csv_sha, _sha256(payload.encode())


@dataclass(frozen=True, slots=True)
class _Previous:
    """What the previous build left that can be reused."""

    site: Path | None
    entries: dict[str, dict[str, Any]]
    site_key: str


def _previous(out_dir: Path) -> _Previous:
    path = out_dir / "build.json"
    try:
        body = json.loads(path.read_text(encoding="utf-8"))
        entries = {str(e["dataset"]): e for e in body["datasets"] if isinstance(e, dict)}
        return _Previous(out_dir, entries, str(body.get("site_key", "")))
    except (OSError, ValueError, KeyError, TypeError):
        return _Previous(out_dir if out_dir.is_dir() else None, {}, "")


def _reuse(prev: _Previous, src: DatasetSource, fingerprint: str) -> FitReport | None:
    entry = prev.entries.get(src.slug)
    if prev.site is None or entry is None or entry.get("fingerprint") != fingerprint or not fingerprint:
        return None
    try:
        report = from_json((prev.site / "datasets" / src.slug / "fit.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return report if report.dataset == src.slug and report.status != "error" else None


def _site_key(config: SiteConfig, theme_files: list[Path]) -> str:
    h = hashlib.sha256(repr(config).encode())
    h.update(__version__.encode())
    h.update(json.dumps(library_versions(RENDER_LIBRARIES), sort_keys=True).encode())
    for path in theme_files:
        h.update(str(path.name).encode())
        h.update(path.read_bytes())
    return h.hexdigest()


def run_build(
    options: BuildOptions, progress: Progress | None = None, executor: Executor | None = None
) -> BuildSummary:
    """Build the site; raises :class:`~sitegen.errors.ConfigError` when nothing may be written."""
    started = time.perf_counter()
    data_dir, out_dir = options.data_dir, options.out_dir
    if not data_dir.is_dir():
        from sitegen.errors import ConfigError  # noqa: PLC0415

        raise ConfigError(f"the data folder {data_dir} does not exist or is not a folder")
    check_output_folder(data_dir, out_dir)
    config, warnings = read_site_config(data_dir / SITE_CONFIG_NAME)
    theme = load_theme(config.theme, data_dir.resolve())
    theme_files = sorted(
        p for d in (*theme.template_dirs, *theme.static_dirs) for p in d.rglob("*") if p.is_file()
    )
    sources = discover(data_dir)
    versions = library_versions(LIBRARIES)
    with build_folder(out_dir) as work:
        prev = _previous(out_dir) if not options.refit else _Previous(None, {}, "")
        prints = {s.slug: _fingerprint(s, config, versions) for s in sources}
        results: dict[str, DatasetResult] = {}
        todo: list[DatasetSource] = []
        for src in sources:
            old = _reuse(prev, src, prints[src.slug][1])
            if old is not None:
                results[src.slug] = DatasetResult(old, None)
            else:
                todo.append(src)
        reused = {s.slug for s in sources} - {s.slug for s in todo}
        total, done = len(sources), len(results)
        if progress:
            progress(done, total, "")
        tasks = [FitTask(s, config.defaults, config.limits) for s in todo]
        for i, res in (executor or make_executor(options.jobs)).run(analyze, tasks):
            results[todo[i].slug] = res
            done += 1
            if progress:
                progress(done, total, todo[i].relpath)
        reports = tuple(_with_sha(results[s.slug].report, prints[s.slug][0]) for s in sources)
        site_key = _site_key(config, theme_files)
        ctx = pages.SiteContext(config, theme)
        entries = _render(work, ctx, sources, results, reports, prev, prints, site_key, reused)
        hist_warnings = history.write(work, ctx, reports, prev.site, results)
        (work / "index.html").write_text(
            pages.render_index(ctx, reports, tag_blocks(reports)), encoding="utf-8"
        )
        summary_files(work, reports)
        assets.write_bundle(work, prev.site)
        assets.write_static(work, theme)
        _write_build_json(work, entries, versions, site_key)
        swap_in(work, out_dir)
    traces = tuple(
        (s.relpath, results[s.slug].debug_trace or "") for s in sources if results[s.slug].debug_trace
    )
    return BuildSummary(
        out_dir=out_dir,
        reports=reports,
        fitted=len(todo),
        reused=len(sources) - len(todo),
        seconds=time.perf_counter() - started,
        warnings=tuple(warnings + hist_warnings),
        debug_traces=traces,
    )


def _with_sha(report: FitReport, sha: str) -> FitReport:
    return report if report.input_sha256 or not sha else replace(report, input_sha256=sha)


def _render(
    work: Path,
    ctx: pages.SiteContext,
    sources: Sequence[DatasetSource],
    results: dict[str, DatasetResult],
    reports: Sequence[FitReport],
    prev: _Previous,
    prints: dict[str, tuple[str, str]],
    site_key: str,
    reused_slugs: set[str],
) -> list[dict[str, Any]]:
    entries = []
    for i, (src, report) in enumerate(zip(sources, reports, strict=True)):
        folder = work / "datasets" / src.slug
        folder.mkdir(parents=True, exist_ok=True)
        res = results[src.slug]
        old_folder = prev.site / "datasets" / src.slug if prev.site is not None else None
        reused = src.slug in reused_slugs
        if reused and old_folder is not None:
            files = _copy_data_files(old_folder, folder)
        else:
            files = dataset_files(folder, report, res.observations, src, ctx.config.offer_source)
        prev_r = reports[i - 1] if i > 0 else None
        next_r = reports[i + 1] if i + 1 < len(reports) else None
        page_key = _sha256(
            json.dumps(
                [
                    prints[src.slug][1],
                    site_key,
                    files,
                    prev_r and [prev_r.dataset, prev_r.title],
                    next_r and [next_r.dataset, next_r.title],
                    report.status,
                ]
            ).encode()  # fmt: skip
        )
        old_entry = prev.entries.get(src.slug, {})
        old_page = old_folder / "index.html" if old_folder is not None else None
        if reused and old_page is not None and old_entry.get("page_key") == page_key and old_page.is_file():
            shutil.copyfile(old_page, folder / "index.html")
        else:
            (folder / "index.html").write_text(
                pages.render_dataset(ctx, report, files, prev_r, next_r), "utf-8"
            )
        entries.append({"dataset": src.slug, "source": src.relpath, "input_sha256": prints[src.slug][0],
                        "fingerprint": prints[src.slug][1], "page_key": page_key,
                        "reused": reused,
                        "status": report.status})  # fmt: skip
    return entries


def _copy_data_files(old: Path, new: Path) -> list[str]:
    files = []
    for path in sorted(old.iterdir()):
        if path.is_file() and path.name != "index.html":
            shutil.copyfile(path, new / path.name)
            files.append(path.name)
    return files


def _write_build_json(
    work: Path, entries: list[dict[str, Any]], versions: dict[str, str], site_key: str
) -> None:
    body = {
        "generator": "sitegen",
        "sitegen_version": __version__,
        "libraries": versions | library_versions(RENDER_LIBRARIES),
        "python": _python_version(),
        "built_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "site_key": site_key,
        "datasets": entries,
    }
    (work / "build.json").write_text(json.dumps(body, indent=1, sort_keys=True) + "\n", encoding="utf-8")


def _python_version() -> str:
    import platform  # noqa: PLC0415

    return platform.python_version()


def load_reports(site: Path) -> list[FitReport]:
    """Every dataset report of a built site (for tools that read a site)."""
    out = []
    for path in sorted((site / "datasets").glob("*/fit.json")):
        out.append(from_json(path.read_text(encoding="utf-8")))
    return out


__all__ = ["BuildOptions", "BuildSummary", "load_reports", "run_build", "to_json"]
