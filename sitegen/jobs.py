"""Work items the executor runs, in this process or a worker: fit one dataset and write its downloads
(and, when its neighbours are known, its page); render one page. Plain picklable data in and out.

Imported only by builds that have work to do.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sitegen.digest import file_sha256
from sitegen.discover import DatasetSource
from sitegen.publish import write_new
from sitegen.spec import Limits

if TYPE_CHECKING:
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


def fit_job(job: FitJob) -> FitDone:
    """Worker: fit one dataset and write its downloads."""
    from sitegen.analyze import FitTask, analyze  # noqa: PLC0415
    from sitegen.report.files import dataset_files, index_entry  # noqa: PLC0415

    result = analyze(FitTask(job.source, job.defaults, job.limits))
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
    files = tuple(dataset_files(job.folder, report, obs, job.source, job.offer_source, max_bytes=max_bytes))
    page_files = write_page(job.page, result.report, files, job.folder / "index.html") if job.page else ()
    sha = file_sha256(job.folder / "fit.json")
    if result.report.status == "error":
        return FitDone(result.report, None, files, result.debug_trace, job.page, page_files, sha)
    return FitDone(None, index_entry(result.report), files, result.debug_trace, job.page, page_files, sha)


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
