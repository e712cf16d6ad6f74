"""Work items the executor runs, in this process or a worker: fit one dataset and write its downloads
(and, when its neighbours are known, its page); render one page. Plain picklable data in and out.

Imported only by builds that have work to do.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sitegen.clib import TRIM_FROM_ROWS, give_back_freed_memory
from sitegen.discover import DatasetSource
from sitegen.publish import write_new
from sitegen.spec import Limits

if TYPE_CHECKING:
    from sitegen.analyze import DatasetResult
    from sitegen.executor import Bounded, Overrun
    from sitegen.model import FitReport
    from sitegen.report.dataset_view import Neighbour
    from sitegen.report.pages import SiteContext


@dataclass(frozen=True, slots=True)
class FitJob:
    """Fit one dataset and write its tables into ``folder``."""

    source: DatasetSource
    defaults: tuple[tuple[str, Any], ...]
    limits: Limits
    folder: Path
    offer_source: bool
    input_sha256: str = ""  # of the file when the build started, to notice a change during the build
    page: Neighbours | None = None  # also write the page, between these neighbours (saves a second round)


@dataclass(frozen=True, slots=True)
class Neighbours:
    """What a dataset page needs besides its report: the site, and the datasets before and after it."""

    ctx: SiteContext
    prev: Neighbour | None
    next: Neighbour | None


@dataclass(frozen=True, slots=True)
class FitDone:
    """What a fitted dataset sends back: its index values (or, failed, its report) and the files written."""

    report: FitReport | None  # a failed dataset's report (small); else None
    entry: dict[str, Any] | None  # index values of a fitted one (all the build needs; the rest is in fit.json)
    files: tuple[str, ...]
    debug_trace: str | None
    paged: Neighbours | None = None  # the page was written, between these neighbours
    page_files: tuple[str, ...] = ()  # what writing the page wrote (index.html, chart images)
    fit_sha256: str = ""  # of the fit.json written (hashed here, in parallel, rather than by the build)
    # The failure says nothing about the input (a read error, a cluster worker lost): the build tries it again
    # and never records it as the dataset's state.
    transient: bool = False


#: What fitting a dataset imports (numpy's FFT: the Durbin–Watson p-value; the chunked reader: the choice of
#: reader), loaded by :func:`preload`.
WORKER_MODULES = ("sitegen.analyze", "sitegen.stream.fit", "numpy.fft")


def preload() -> None:
    """Import what a worker fitting datasets needs, in the build's process before the workers are forked from
    it: each then starts with the modules loaded, instead of loading them again itself."""
    import importlib  # noqa: PLC0415

    for name in WORKER_MODULES:
        importlib.import_module(name)


def fit_job(job: FitJob) -> FitDone:
    """Worker: fit one dataset and write its downloads."""
    from sitegen.analyze import FitTask, analyze  # noqa: PLC0415

    result = analyze(FitTask(job.source, job.defaults, job.limits, job.folder))
    if (result.report.n_rows or 0) >= TRIM_FROM_ROWS:
        give_back_freed_memory()  # the fit's freed arrays, before the observations are written
    return _finish(job, result)


def fit_overrun(job: FitJob, overrun: Overrun) -> FitDone:
    """What a dataset whose fit went past a bound gets (in the build's own process): an error report
    naming the bound and the ``[limits]`` key that sets it, written as a failed fit's would be."""
    import shutil  # noqa: PLC0415

    from sitegen.analyze import DatasetResult, error_report  # noqa: PLC0415

    limits = job.limits
    name = job.source.relpath
    if overrun == "time":
        text = (
            f"fitting {name} was stopped after {limits.max_fit_seconds:g} s, the time bound for one dataset "
            "([limits] max_fit_seconds in site.toml); the other datasets were built. Check the model formula "
            "and the file's size, or raise the bound if a fit this long is expected"
        )
    elif overrun == "memory":
        text = (
            f"fitting {name}{_size_of(job)} ran out of memory: it needed more than {limits.max_fit_megabytes:g} MB, "
            "the memory bound for one dataset ([limits] max_fit_megabytes in site.toml); the other datasets were "
            f"built. {_memory_advice(limits)}"
        )
    elif overrun == "lost":
        text = (
            f"fitting {name} stopped: the cluster worker fitting it was lost (it ended or could not be reached), "
            "again on each try; the other datasets were built. Build again; if it happens again, look at the "
            "workers' logs (memory, the worker's own limits) or build without --cluster"
        )
    else:
        text = (
            f"fitting {name}{_size_of(job)} stopped: the process fitting it ended unexpectedly (the system may "
            "have run out of memory); the other datasets were built. Build again; if it happens again, lower "
            "[limits] max_fit_megabytes in site.toml below the memory this machine has free, so that the bound "
            f"stops such a fit with this message instead, or leave the file out. {_memory_advice(limits)}"
        )
    shutil.rmtree(job.folder, ignore_errors=True)  # whatever the stopped fit had written
    return _finish(job, DatasetResult(error_report(job.source, text), None, transient=overrun == "lost"))


def _size_of(job: FitJob) -> str:
    """`` (a 19.6 MB file)``, the size of the dataset's file as it is now, or nothing if it cannot be seen."""
    try:
        size = job.source.csv_path.stat().st_size
    except OSError:
        return ""
    return f" (a {size / 1e6:,.1f} MB file)" if size >= 100_000 else f" (a {size / 1e3:,.1f} kB file)"


def _memory_advice(limits: Limits) -> str:
    """What to do about a dataset too large for its memory bound."""
    return (
        f"A two-column fit in memory takes about {FIT_BASE_MEGABYTES:g} MB plus {FIT_BYTES_PER_ROW:g} bytes per "
        "row (more with more model columns). Have such a file read and fitted in chunks, with bounded memory: "
        f"files above [limits] stream_above_megabytes (now {limits.stream_above_megabytes:g} MB) are; set it "
        "below this file's size in site.toml (or stream_above_megabytes in its sidecar), or raise "
        "max_fit_megabytes"
    )


#: The measured memory of a fit in memory (two-column ``y ~ x``, ``bench/large.py --whole``): the README's rule.
FIT_BASE_MEGABYTES = 130
FIT_BYTES_PER_ROW = 290


def _finish(job: FitJob, result: DatasetResult) -> FitDone:
    """Write a fitted (or failed) dataset's downloads, and its page when its neighbours are known."""
    from sitegen.report.files import dataset_files, index_entry  # noqa: PLC0415

    report = result.report
    if job.input_sha256 and report.input_sha256 and report.input_sha256 != job.input_sha256:
        from dataclasses import replace  # noqa: PLC0415

        from sitegen.model import Message  # noqa: PLC0415

        text = (
            f"{job.source.relpath} changed while the build was running; this page shows the file as it was "
            "read for fitting — build again once the file is complete"
        )
        status = "warn" if report.status == "ok" else report.status
        report = replace(report, messages=(Message("warning", text), *report.messages), status=status)
        result = replace(result, report=report)
    job.folder.mkdir(parents=True, exist_ok=True)
    max_bytes = int(job.limits.max_megabytes * 1e6)
    report, obs = result.report, result.observations
    written = dataset_files(job.folder, report, obs, job.source, job.offer_source, max_bytes=max_bytes)
    files = tuple(sorted({*written.names, *result.written}))
    # Chart images run a JavaScript engine that reserves far more address space than a fit's memory bound
    # allows: such pages are written in the build's page round, outside the bound.
    page = job.page if job.page is not None and not job.page.ctx.config.static_images else None
    page_files = write_page(page, result.report, files, job.folder / "index.html") if page else ()
    sha = written.fit_sha256
    if result.report.status == "error":
        return FitDone(result.report, None, files, result.debug_trace, page, page_files, sha, result.transient)
    return FitDone(None, index_entry(result.report), files, result.debug_trace, page, page_files, sha)


def fit_bounds(limits: Limits) -> Bounded[FitJob, FitDone]:
    """The bounds every dataset's fit runs under, from ``[limits]``."""
    from sitegen.executor import Bounded  # noqa: PLC0415

    return Bounded(limits.max_fit_seconds, limits.max_fit_megabytes, fit_overrun)


@dataclass(frozen=True, slots=True)
class PageJob:
    """Render one dataset page."""

    ctx: SiteContext
    report: FitReport | None  # None: read the full report from the folder's fit.json
    files: tuple[str, ...]
    prev: Neighbour | None
    next: Neighbour | None
    target: Path


def page_job(job: PageJob) -> tuple[str, ...]:
    """Worker: render a dataset page to its file; returns the names written."""
    from sitegen.model import from_json  # noqa: PLC0415

    report = job.report or from_json((job.target.parent / "fit.json").read_text(encoding="utf-8"))
    return write_page(Neighbours(job.ctx, job.prev, job.next), report, job.files, job.target)


def write_page(where: Neighbours, report: FitReport, files: tuple[str, ...], target: Path) -> tuple[str, ...]:
    """Render a dataset page (and its static chart images when the site asks for them); returns the names written."""
    from sitegen.report.pages import render_dataset  # noqa: PLC0415

    ctx = where.ctx
    listed = [f for f in files if not f.startswith("chart-")]
    images: list[str] = []
    if ctx.config.static_images and report.status != "error":
        from sitegen.report.images import write_chart_images  # noqa: PLC0415

        images = write_chart_images(report, target.parent, ctx.theme.chart_colors)
    html = render_dataset(ctx, report, sorted(listed + images), where.prev, where.next)
    write_new(target, html)  # whoever still reads the old page keeps reading it whole
    return (target.name, *images)
