"""Orchestrate a build: discover → fit (or reuse) → render → publish.

Data flows one way. The previous site is read only for what it can save:
stored results whose fingerprint still matches (no refit), pages whose inputs
did not change (no re-render), the chart bundle, and the history of estimates.
A missing or corrupt previous site only means more work, never an error.

Work runs through the executor seam twice: fitting each dataset and writing its
tables, then rendering the pages whose inputs changed. When nothing at all
changed, only ``build.json`` is rewritten (atomically).

Heavy libraries, and our own modules that only a build with work to do needs
(the spare, the table of output files, the executor), are imported inside the
functions that need them, so that a rebuild with nothing to do stays fast.
"""

from __future__ import annotations

import contextlib
import json
import os
import time
from collections.abc import Callable, Sequence
from dataclasses import astuple, dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

from sitegen import __version__
from sitegen.confine import files_under, read_inside
from sitegen.digest import file_sha256, sha256_hex
from sitegen.discover import SITE_CONFIG_NAME, DatasetSource, discover
from sitegen.errors import INTERNAL_ERROR_WORDS, ConfigError, OutsideFolderError
from sitegen.jsontext import json_text
from sitegen.publish import build_folder, check_output_folder, copy_new, swap_in
from sitegen.records import (
    NO_INPUTS,
    NO_PREVIOUS,
    BuildRecord,
    DatasetRecord,
    FileStat,
    InputRecord,
    Measured,
    PreviousBuild,
    file_stat,
    fit_json_intact,
    manifest,
    measure,
    nothing_changed,
    read_previous,
    retimed,
)
from sitegen.report.theme import Theme, default_theme_dir, load_theme
from sitegen.spec import SiteConfig, read_site_config
from sitegen.versions import library_versions

if TYPE_CHECKING:
    from sitegen.executor import Executor
    from sitegen.jobs import FitJob, Neighbours, PageJob
    from sitegen.model import FitReport
    from sitegen.report.dataset_view import Neighbour
    from sitegen.report.pages import SiteContext
    from sitegen.spare import Spare

LIBRARIES = ("numpy", "scipy", "pandas", "patsy", "statsmodels")
RENDER_LIBRARIES = ("altair", "jinja2", "markdown-it-py", "vl-convert-python")
Progress = Callable[[int, int, str], None]
#: How often a dataset whose fit failed transiently (its CSV could not be read, a cluster worker was lost with
#: it) is tried in one build, in all.
TRANSIENT_TRIES = 3


@dataclass(frozen=True, slots=True)
class BuildOptions:
    """What the user asked for."""

    data_dir: Path
    out_dir: Path
    jobs: int | None = None
    refit: bool = False
    theme: Path | None = None  # a theme folder named on the command line (trusted: it may lie anywhere)
    cluster: str | None = None  # a Dask scheduler's address (tcp://HOST:PORT): the work runs there (cluster.py)


@dataclass(frozen=True, slots=True)
class Outcome:
    """One dataset's result as the CLI reports it."""

    dataset: str
    source: str
    status: str
    message: str
    requirements: str = "none"  # "met", "unmet" or "none" (nothing declared)
    sidecar_warnings: tuple[str, ...] = ()  # unknown or misspelt sidecar keys, for the terminal too


@dataclass(frozen=True, slots=True)
class BuildSummary:
    """What a build did, for the CLI's closing line and exit status."""

    out_dir: Path
    outcomes: tuple[Outcome, ...]
    fitted: int
    reused: int
    seconds: float
    warnings: tuple[str, ...] = ()
    debug_traces: tuple[DebugTrace, ...] = field(default=())

    @property
    def errors(self) -> int:
        return sum(1 for o in self.outcomes if o.status == "error")

    @property
    def warned(self) -> int:
        return sum(1 for o in self.outcomes if o.status == "warn")

    @property
    def unmet(self) -> int:
        """Datasets with at least one declared requirement not met."""
        return sum(1 for o in self.outcomes if o.requirements == "unmet")


@dataclass(frozen=True, slots=True)
class DebugTrace:
    """A dataset's traceback kept for ``--debug``: the input file it came from and the trace's text."""

    source: str
    trace: str


@dataclass(frozen=True, slots=True)
class _Ready:
    """A dataset's result in this build, fitted or reused, and the data files its folder holds."""

    report: FitReport
    data_files: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class _WorkerPage:
    """A page the worker that fitted a dataset wrote: the neighbours it linked to and the files it wrote."""

    neighbours: Neighbours | None
    files: tuple[str, ...]


NO_WORKER_PAGE = _WorkerPage(None, ())


@dataclass(frozen=True, slots=True)
class _Executed:
    """What one full build did, for :class:`BuildSummary`."""

    outcomes: tuple[Outcome, ...]
    fitted: int  # datasets fitted in this build (the others were reused)
    warnings: list[str]
    debug_traces: tuple[DebugTrace, ...]


def _now() -> str:
    """The time of the build, UTC, to the second (ISO 8601, as ``datetime.isoformat`` writes it)."""
    return time.strftime("%Y-%m-%dT%H:%M:%S+00:00", time.gmtime())


def _shared_inputs(config: SiteConfig, versions: dict[str, str]) -> str:
    """What shapes every dataset's numbers besides its own files, as text for :func:`sitegen.records.measure`."""
    return json.dumps(
        {
            "defaults": [[k, v] for k, v in config.defaults],
            "limits": list(astuple(config.limits)),  # a failure past a bound is kept only while the bound stays
            "offer_source": config.offer_source,
            "sitegen": __version__,
            "libraries": versions,
        },
        sort_keys=True,
        default=str,
    )


def _site_key(config: SiteConfig, theme: Theme) -> str:
    """Fingerprint of everything besides a dataset's own inputs that shapes its page."""
    parts = [repr(config).encode(), __version__.encode()]
    parts.append(json.dumps(library_versions(RENDER_LIBRARIES), sort_keys=True).encode())
    ours = default_theme_dir()
    for folder in (*theme.template_dirs, *theme.static_dirs):
        if folder.parent == ours:  # the default theme is sitegen's own files: read without the confinement checks
            for path in sorted(p for p in folder.rglob("*") if p.is_file()):
                parts += [path.relative_to(folder).as_posix().encode(), path.read_bytes()]
            continue
        for rel, path, refused in files_under(folder):  # a file refused (a link out) counts by its name only
            try:
                data = refused.encode() if refused else read_inside(path, folder, where="theme folder")
            except (OSError, OutsideFolderError):
                data = b"<unreadable>"
            parts += [rel.encode(), data]
    parts.append(theme.charts_json.encode())
    return sha256_hex(b"".join(parts))


# --- the build --------------------------------------------------------------------------


def run_build(
    options: BuildOptions, progress: Progress | None = None, executor: Executor | None = None
) -> BuildSummary:
    """Build the site; raises :class:`~sitegen.errors.ConfigError` when nothing may be written."""
    started = time.perf_counter()
    data_dir, out_dir = options.data_dir, options.out_dir
    if options.cluster:  # workers see the folders at the same absolute paths, whatever their working folder
        data_dir, out_dir = data_dir.absolute(), out_dir.absolute()
    if not data_dir.is_dir():
        raise ConfigError(f"the data folder {data_dir} does not exist or is not a folder")
    check_output_folder(data_dir, out_dir)
    config, warnings = read_site_config(data_dir / SITE_CONFIG_NAME, data_dir)
    theme = load_theme(config.theme, data_dir.resolve(), options.theme)
    sources = discover(data_dir, config.ignore)
    shared = _shared_inputs(config, library_versions(LIBRARIES))
    site_key = _site_key(config, theme)
    with build_folder(out_dir) as folder:
        prev = read_previous(out_dir) if not options.refit else NO_PREVIOUS
        measured = {s.slug: measure(s, shared, _recorded_inputs(prev, s.slug)) for s in sources}
        if prev.record is not None and nothing_changed(prev, sources, measured, site_key):
            outcomes = _touch_build_json(out_dir, prev, prev.record, measured)
            return BuildSummary(out_dir, outcomes, 0, len(sources), time.perf_counter() - started, tuple(warnings))
        work = folder.open()  # there is work to do: the build folder (the spare, when there is one)
        if theme.sandboxed:  # a user's templates: a syntax error stops the build before the spare is touched
            from sitegen.report.pages import check_theme  # noqa: PLC0415

            check_theme(theme)
        cluster = None
        if options.cluster and executor is None:  # asked before anything is sent: can every worker see the folders?
            from sitegen.cluster import connect  # noqa: PLC0415

            cluster = connect(options.cluster, data_dir, out_dir, sources, theme)
        from sitegen.spare import open_spare  # noqa: PLC0415 - as below: only when there is work

        try:
            spare = open_spare(work, trusted=prev.site is not None)
        except BaseException:
            if cluster is not None:
                cluster.close()
            raise
        from sitegen.executor import make_executor  # noqa: PLC0415 - a process pool only when there is work

        # Chart images run the chart converter, whose threads must stay out of this process (a pool
        # forked from it later could wait for ever on their locks): then even a lone job goes to a worker.
        with executor or cluster or make_executor(options.jobs, inline_single=not config.static_images) as run:
            state = _Build(
                work=work,
                published=out_dir,
                spare=spare,
                prev=prev,
                sources=sources,
                measured=measured,
                config=config,
                site_key=site_key,
                run=run,
                progress=progress,
            )
            try:
                summary = state.execute(theme)
            except ConfigError:  # e.g. a user template that fails as it renders: no half-built spare stays
                import shutil  # noqa: PLC0415

                shutil.rmtree(work, ignore_errors=True)
                raise
        swap_in(work, out_dir)
    return BuildSummary(
        out_dir=out_dir,
        outcomes=summary.outcomes,
        fitted=summary.fitted,
        reused=len(sources) - summary.fitted,
        seconds=time.perf_counter() - started,
        warnings=tuple(warnings + summary.warnings),
        debug_traces=summary.debug_traces,
    )


def _failure_from_input(report: FitReport, csv_sha: str) -> bool:
    """A failed result read from the bytes the fingerprint covers (or refused before reading) and not
    sitegen's own failure. The build also checks that no input file changed while it ran."""
    errors = [m.text for m in report.messages if m.level == "error"]
    return (
        bool(errors)
        and bool(csv_sha)
        and report.input_sha256 in ("", csv_sha)
        and not any(INTERNAL_ERROR_WORDS in t for t in errors)
    )


def _stored_report(folder: Path, slug: str, csv_sha: str) -> FitReport | None:
    """The stored result in ``folder/fit.json`` when it is whole and reusable, else None."""
    from sitegen.model import from_json  # noqa: PLC0415

    try:
        report = from_json((folder / "fit.json").read_text(encoding="utf-8"), light=True)
    except (OSError, ValueError):
        return None
    if report.dataset != slug:
        return None
    if report.status == "error":  # the same input fails the same way
        return report if _failure_from_input(report, csv_sha) else None
    if not report.coefficients or report.n is None:
        return None  # a fit.json that parses but lost its numbers is not a result
    return report


def _recorded_inputs(prev: PreviousBuild, slug: str) -> InputRecord:
    entry = prev.entries.get(slug)
    return entry.inputs if entry is not None else NO_INPUTS


def _touch_build_json(
    out_dir: Path, prev: PreviousBuild, then: BuildRecord, measured: dict[str, Measured]
) -> tuple[Outcome, ...]:
    """Nothing changed: record this build in build.json (atomically) and leave the rest (``then`` is the
    previous build's record)."""
    datasets = tuple(replace(e, reused=True, inputs=measured[e.dataset].inputs) for e in then.datasets)
    record = replace(then, built_at=_now(), datasets=datasets)
    tmp = out_dir / f".build.json.{os.getpid()}.tmp"
    tmp.write_text(retimed(prev, record) or json_text(record.as_json()), encoding="utf-8")
    tmp.replace(out_dir / "build.json")
    return tuple(
        Outcome(e.dataset, e.source, e.status, e.message, e.requirements, e.sidecar_warnings) for e in datasets
    )


def _sizes(files: dict[str, FileStat]) -> dict[str, int]:
    """The sizes of a manifest's files."""
    return {name: stat.size for name, stat in files.items()}


class _Build:
    """One full build into the temporary folder."""

    def __init__(
        self,
        *,
        work: Path,
        published: Path,
        spare: Spare,
        prev: PreviousBuild,
        sources: Sequence[DatasetSource],
        measured: dict[str, Measured],
        config: SiteConfig,
        site_key: str,
        run: Executor,
        progress: Progress | None,
    ) -> None:
        self.work, self.spare, self.prev, self.sources = work, spare, prev, sources
        self.measured = measured  # per dataset: its inputs' hashes, fingerprint and stats (records.Measured)
        self.published = published  # the output folder
        self.config, self.site_key, self.run, self.progress = config, site_key, run, progress
        self.fit_shas: dict[str, str] = {}  # the known sha256 of each dataset's fit.json (checked or just written)
        # the previous manifest by dataset folder
        self.then_files = prev.record.files_by_folder() if prev.record is not None else {}
        self.kept: set[str] = set()  # reused datasets whose folder in the spare was already right
        self.checked: set[str] = set()  # reused datasets whose published folder was checked file by file
        self.titles: dict[str, str] = {}  # expected titles of the neighbours of datasets being fitted
        self.transient: set[str] = set()  # datasets whose failure was transient (never kept: see _failure_kept)
        self.built_at = _now()

    def _stored_light(self, entry: DatasetRecord, old: Path, slug: str, record: DatasetRecord) -> FitReport | None:
        """The stored result, light: from build.json when its fit.json is unchanged, else parsed from fit.json.

        ``record`` is the build.json entry that recorded ``old/fit.json`` (its sha256 and stat).
        """
        from sitegen.report.files import report_from_index_entry  # noqa: PLC0415

        if entry.fit_sha256:
            if not fit_json_intact(old / "fit.json", record):
                return None  # changed since the build that wrote it: fit again rather than trust it
            if entry.index.get("status") != "error":
                try:
                    report = report_from_index_entry(dict(entry.index), entry.input_sha256)
                    self.fit_shas[slug] = entry.fit_sha256
                    return report
                except (KeyError, TypeError, ValueError):
                    pass
        return _stored_report(old, slug, self.measured[slug].input_sha256)

    def _spare_holds(self, slug: str, entry: DatasetRecord) -> bool:
        """The spare's folder for ``slug`` holds the same result as the published one, whole."""
        mine = self.spare.entries.get(slug)
        return (
            mine is not None
            and bool(entry.fit_sha256)
            and mine.fingerprint == entry.fingerprint
            and mine.fit_sha256 == entry.fit_sha256
            and self.spare.recorded.get(slug) == self.spare.folders.get(slug)
        )

    def _reuse(self, src: DatasetSource) -> _Ready | None:
        from sitegen.report.outputs import is_data_file  # noqa: PLC0415

        entry = self.prev.entries.get(src.slug)
        fp = self.measured[src.slug].fingerprint
        if self.prev.site is None or entry is None or entry.fingerprint != fp or not fp:
            return None
        if not entry.failure_reusable:
            return None  # a failure is reused only when the input itself decided it
        new = self.work / "datasets" / src.slug
        if self._spare_holds(src.slug, entry):
            report = self._stored_light(entry, new, src.slug, self.spare.entries[src.slug])
            if report is not None:
                self.kept.add(src.slug)
                return _Ready(report, tuple(n for n in sorted(self.spare.folders[src.slug]) if is_data_file(n)))
        old = self.prev.site / "datasets" / src.slug
        report = self._stored_light(entry, old, src.slug, entry)
        if report is None:
            return None
        then_here = self.then_files.get(src.slug)
        here = manifest(old)
        # By size: a published site copied elsewhere (new inodes and times) is still reused; its fit.json
        # was checked by hash. The spare, our own hidden copy, is held to the full record (_spare_holds).
        if not then_here or _sizes(then_here) != _sizes(here):
            self.fit_shas.pop(src.slug, None)
            return None  # a file of its folder is missing or changed since the previous build wrote it
        self.checked.add(src.slug)
        new.mkdir(parents=True, exist_ok=True)
        files = [name for name in here if "/" not in name and is_data_file(name)]  # sorted
        for name in files:
            copy_new(old / name, new / name)
        return _Ready(report, tuple(files))

    def execute(self, theme: Theme) -> _Executed:
        from sitegen.jobs import FitJob, Neighbours, fit_bounds, fit_job, page_job, preload  # noqa: PLC0415
        from sitegen.report import assets, history, pages  # noqa: PLC0415
        from sitegen.report.files import report_from_index_entry, summary_files, summary_row  # noqa: PLC0415
        from sitegen.report.tags import tag_blocks  # noqa: PLC0415

        done: dict[str, _Ready] = {}
        traces: list[DebugTrace] = []
        jobs: list[FitJob] = []
        ctx = pages.SiteContext(self.config, theme)
        for i, src in enumerate(self.sources):
            reused = self._reuse(src)
            if reused is not None:
                done[src.slug] = reused
            else:
                folder = self.work / "datasets" / src.slug
                for name in self.spare.folders.get(src.slug, {}):  # written anew by the fit, or no longer wanted
                    (folder / name).unlink(missing_ok=True)
                sha = self.measured[src.slug].input_sha256
                config = self.config
                around = Neighbours(ctx, self._expected_title(i - 1), self._expected_title(i + 1))
                jobs.append(FitJob(src, config.defaults, config.limits, folder, config.offer_source, sha, around))
        total = len(self.sources)
        count = len(done)
        if self.progress:
            self.progress(count, total, "")
        if jobs:
            # Workers are forked from this process when the first job is sent: what is loaded here by then they
            # start with, instead of each loading it again (the fitting modules, the theme's templates).
            preload()
            pages.load_templates(theme)
        paged: dict[str, _WorkerPage] = {}
        round_jobs = jobs
        for tries_left in range(TRANSIENT_TRIES - 1, -1, -1):
            again: list[FitJob] = []  # a read error or a lost cluster worker: tried again (TRANSIENT_TRIES)
            for i, res in self.run.run(fit_job, round_jobs, fit_bounds(self.config.limits)):
                job = round_jobs[i]
                slug = job.source.slug
                if res.transient and tries_left:
                    again.append(job)
                    continue
                if res.transient:
                    self.transient.add(slug)
                report = res.report or report_from_index_entry(res.entry or {}, self.measured[slug].input_sha256)
                done[slug] = _Ready(report, res.files)
                paged[slug] = _WorkerPage(res.paged, res.page_files)
                if res.fit_sha256:
                    self.fit_shas[slug] = res.fit_sha256
                if res.debug_trace:
                    traces.append(DebugTrace(job.source.relpath, res.debug_trace))
                count += 1
                if self.progress:
                    self.progress(count, total, job.source.relpath)
            if not again:
                break
            round_jobs = again
        refitted = {j.source.slug for j in jobs}
        reports = [_with_sha(done[s.slug].report, self.measured[s.slug].input_sha256) for s in self.sources]
        entries, page_jobs, page_files = self._plan_pages(ctx, reports, done, refitted, paged)
        pending = self.run.run(page_job, page_jobs)  # the pool renders pages while this process does the rest
        index = pages.render_index(ctx, reports, tag_blocks(reports))
        (self.work / "index.html").write_text(index, encoding="utf-8")
        summary_files(self.work, reports)
        # The history goes on after --refit too (which reuses nothing else of the published site).
        hist_warnings = history.write(self.work, ctx, reports, self.published)
        self.built_at = _now()
        site_assets = {
            *assets.write_bundle(self.work),
            *assets.write_static(self.work, theme),
            assets.write_built_at(self.work, self.built_at),
        }
        for i, names in pending:
            page_files[page_jobs[i].target.parent.name] = names
        self._tidy({slug: {*ready.data_files, *page_files[slug]} for slug, ready in done.items()}, site_assets)
        self._write_build_json(entries)
        outcomes = tuple(
            Outcome(
                r.dataset,
                r.source,
                r.status,
                str(summary_row(r)["message"]),
                r.requirements_state,
                sidecar_warnings(r),
            )
            for r in reports
        )
        return _Executed(outcomes, len(jobs), hist_warnings, tuple(traces))

    def _plan_pages(
        self,
        ctx: SiteContext,
        reports: Sequence[FitReport],
        done: dict[str, _Ready],
        refitted: set[str],
        paged: dict[str, _WorkerPage],
    ) -> tuple[list[DatasetRecord], list[PageJob], dict[str, tuple[str, ...]]]:
        """Which pages to keep, copy or render; their build.json entries; the names of pages already in place."""
        from sitegen.jobs import PageJob  # noqa: PLC0415
        from sitegen.report.dataset_view import Neighbour  # noqa: PLC0415
        from sitegen.report.files import index_entry, summary_row  # noqa: PLC0415
        from sitegen.report.outputs import is_data_file  # noqa: PLC0415

        entries: list[DatasetRecord] = []
        jobs: list[PageJob] = []
        in_place: dict[str, tuple[str, ...]] = {}
        for i, (src, report) in enumerate(zip(self.sources, reports, strict=True)):
            files = done[src.slug].data_files
            prev_r = Neighbour(reports[i - 1].dataset, reports[i - 1].title) if i > 0 else None
            next_r = Neighbour(reports[i + 1].dataset, reports[i + 1].title) if i + 1 < len(reports) else None
            fp = self.measured[src.slug].fingerprint
            around = [[n.dataset, n.title] if n else None for n in (prev_r, next_r)]
            key = sha256_hex(json.dumps([fp, self.site_key, list(files), *around, report.status]).encode())
            target = self.work / "datasets" / src.slug / "index.html"
            old_entry = self.prev.entries.get(src.slug)
            old_page = self.prev.site / "datasets" / src.slug / "index.html" if self.prev.site else None
            written = paged.get(src.slug, NO_WORKER_PAGE)
            if written.neighbours is not None and (written.neighbours.prev, written.neighbours.next) == (
                prev_r,
                next_r,
            ):
                in_place[src.slug] = written.files  # written by the worker that fitted it, with the right neighbours
            elif src.slug in self.kept and self.spare.entries[src.slug].page_key == key:
                in_place[src.slug] = tuple(n for n in self.spare.folders[src.slug] if not is_data_file(n))
            elif (
                src.slug in self.checked  # its published folder was found as recorded
                and old_page is not None
                and old_entry is not None
                and old_entry.page_key == key
                and self._copy_page(old_page.parent, target.parent)
            ):
                in_place[src.slug] = self._page_names(src.slug)
            else:
                full = report if report.status == "error" else None  # else read from its fit.json
                jobs.append(PageJob(ctx, full, files, prev_r, next_r, target))
            entries.append(
                DatasetRecord(
                    dataset=src.slug,
                    source=src.relpath,
                    input_sha256=self.measured[src.slug].input_sha256,
                    fingerprint=fp,
                    page_key=key,
                    reused=src.slug not in refitted,
                    status=report.status,
                    message=str(summary_row(report)["message"]),
                    index=index_entry(report),
                    inputs=self.measured[src.slug].inputs,
                    failure_kept=self._failure_kept(src, done[src.slug].report),
                )
            )
        return entries, jobs, in_place

    def _failure_kept(self, src: DatasetSource, report: FitReport) -> bool:
        """The dataset failed because of its input, read as the fingerprint saw it: no input file changed
        while this build ran (a file away, garbled or too large for a moment is tried again next time)."""
        measured = self.measured[src.slug]
        if report.status != "error" or not _failure_from_input(report, measured.input_sha256):
            return False
        if src.slug in self.transient:  # a read error or a lost cluster worker says nothing about the input
            return False
        return measured.unchanged_since(src)

    def _page_names(self, slug: str) -> tuple[str, ...]:
        from sitegen.report.outputs import is_data_file  # noqa: PLC0415

        names = ["index.html"]
        if self.config.static_images:  # the page's chart images come with it
            names += [n for n in self.then_files.get(slug, {}) if n != "index.html" and not is_data_file(n)]
        return tuple(names)

    def _copy_page(self, old: Path, new: Path) -> bool:
        """Copy a dataset's page (and its chart images) from the published site; False if that failed."""
        try:
            for name in self._page_names(new.name):
                copy_new(old / name, new / name)
        except OSError:
            return False
        return True

    def _tidy(self, wanted: dict[str, set[str]], site_assets: set[str]) -> None:
        """Remove from the build folder what the spare held and this site does not: datasets that are
        gone, files a dataset no longer has, site files of other versions."""
        from sitegen.publish import MARKER  # noqa: PLC0415
        from sitegen.report.outputs import site_names  # noqa: PLC0415
        from sitegen.spare import remove  # noqa: PLC0415

        folders = self.work / "datasets"
        for slug, names in self.spare.folders.items():
            keep = wanted.get(slug)
            if keep is None:
                remove(folders / slug)
                continue
            for name in names:
                if name not in keep:
                    remove(folders / slug / name)
        top = {"datasets", "assets", MARKER, *site_names()}
        with os.scandir(self.work) as entries:
            for entry in entries:
                if entry.name not in top:
                    remove(Path(entry.path))
        for path in sorted((self.work / "assets").rglob("*"), reverse=True):  # files before their folders
            if path.is_file() and path.relative_to(self.work).as_posix() not in site_assets:
                remove(path)
            elif path.is_dir() and not any(path.iterdir()):
                path.rmdir()

    def _expected_title(self, i: int) -> Neighbour | None:
        """The ``i``-th dataset as its page will name it: the sidecar's title, else the file
        name; None past either end.

        Read here so that the worker that fits a dataset can write its page too; should a fitted
        title differ after all, the neighbouring pages are simply rendered again.
        """
        from sitegen.report.dataset_view import Neighbour  # noqa: PLC0415
        from sitegen.spec import read_sidecar  # noqa: PLC0415

        if not 0 <= i < len(self.sources):
            return None
        src = self.sources[i]
        if src.slug not in self.titles:
            title = Path(src.relpath).stem
            # Only a guess: whatever goes wrong here is reported when the dataset itself is fitted.
            with contextlib.suppress(Exception):
                title = read_sidecar(src.sidecar_path, dict(self.config.defaults), src.relpath, src.root).title or title
            self.titles[src.slug] = title
        return Neighbour(src.slug, self.titles[src.slug])

    def _write_build_json(self, entries: list[DatasetRecord]) -> None:
        import platform  # noqa: PLC0415

        def with_fit_json(entry: DatasetRecord) -> DatasetRecord:
            """lets a rebuild trust a stored result without parsing it (and keep it in place)"""
            stored = self.work / "datasets" / entry.dataset / "fit.json"
            sha = self.fit_shas.get(entry.dataset) or file_sha256(stored)
            return replace(entry, fit_sha256=sha, fit_stat=file_stat(stored))

        record = BuildRecord(
            sitegen_version=__version__,
            libraries=library_versions(LIBRARIES) | library_versions(RENDER_LIBRARIES),
            python=platform.python_version(),
            built_at=self.built_at,
            site_key=self.site_key,
            title=self.config.title,
            mail_budget_megabytes=self.config.mail_budget_megabytes,
            datasets=tuple(with_fit_json(e) for e in entries),
            files=manifest(self.work),  # written last: every other file of the site is in place
        )
        (self.work / "build.json").write_text(json_text(record.as_json()), encoding="utf-8")


def sidecar_warnings(report: FitReport) -> tuple[str, ...]:
    """The report's warnings about its sidecar's keys (each names the sidecar file)."""
    return tuple(m.text for m in report.messages if m.level == "warning" and "sidecar key" in m.text)


def _with_sha(report: FitReport, sha: str) -> FitReport:
    return report if report.input_sha256 or not sha else replace(report, input_sha256=sha)
