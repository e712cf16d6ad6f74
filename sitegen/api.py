"""The Python interface: build a site from a data folder in a pipeline or a notebook.

``sitegen.build_site(data_dir, out_dir, **options)`` runs the same build as ``sitegen build`` and returns a
:class:`SiteResult`: each dataset's status, message, declared requirements and files. It raises the errors of
:mod:`sitegen.errors` where the command would exit with status 2 (nothing written); a dataset that cannot be
fitted is not an exception but a result with status ``"error"``, as on the site.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Literal

from sitegen.errors import ConfigError

if TYPE_CHECKING:
    from sitegen.model import Requirement

Status = Literal["ok", "warn", "error"]
RequirementsState = Literal["met", "unmet", "none"]


@dataclass(frozen=True, slots=True)
class DatasetOutcome:
    """One dataset of a built site."""

    dataset: str  # the slug: its folder under datasets/
    source: str  # the CSV's path relative to the data folder
    status: Status
    message: str  # the first error or warning, as in summary.csv ("" when there is none)
    requirements_state: RequirementsState  # "none" when the sidecar declares no requirements
    requirements: tuple[Requirement, ...]  # each declared criterion, judged (empty when none are declared)
    folder: Path  # datasets/<slug>/ of the site
    page: Path  # its index.html
    fit_json: Path  # the full FitReport


@dataclass(frozen=True, slots=True)
class SiteResult:
    """What :func:`build_site` built."""

    out_dir: Path
    index: Path  # the site's index.html
    datasets: tuple[DatasetOutcome, ...]
    fitted: int  # datasets fitted by this build
    reused: int  # datasets whose stored result was reused
    seconds: float
    warnings: tuple[str, ...]  # site-wide warnings (e.g. an unknown site.toml key)

    @property
    def failed(self) -> tuple[DatasetOutcome, ...]:
        """The datasets that could not be fitted."""
        return tuple(d for d in self.datasets if d.status == "error")

    @property
    def unmet(self) -> tuple[DatasetOutcome, ...]:
        """The datasets with at least one declared requirement not met."""
        return tuple(d for d in self.datasets if d.requirements_state == "unmet")

    def dataset(self, slug: str) -> DatasetOutcome:
        """The named dataset's outcome; ``KeyError`` if the site has no such dataset."""
        for d in self.datasets:
            if d.dataset == slug:
                return d
        raise KeyError(slug)


def build_site(
    data_dir: str | Path,
    out_dir: str | Path,
    *,
    jobs: int | None = None,
    refit: bool = False,
    theme: str | Path | None = None,
    progress: Callable[[int, int, str], None] | None = None,
    cluster: str | None = None,
) -> SiteResult:
    """Build (or rebuild) the site of ``data_dir`` into ``out_dir``, as ``sitegen build`` does.

    ``jobs`` is the number of worker processes (default: all cores), ``refit`` fits every dataset again,
    ``theme`` is a theme folder you trust (as ``--theme``; it may lie outside the data folder), and
    ``progress(done, total, source)`` is called as datasets finish, ``cluster`` is a Dask scheduler's address to
    run the work on (as ``--cluster``). Raises :class:`sitegen.errors.ConfigError`
    (or a subclass) when nothing could be written: a missing data folder, an invalid site.toml or theme, an
    unsafe or locked output folder.
    """
    from sitegen.build import BuildOptions, run_build  # noqa: PLC0415 - keeps `import sitegen` light

    if jobs is not None and jobs < 1:
        raise ConfigError("jobs must be at least 1")
    options = BuildOptions(
        Path(data_dir), Path(out_dir), jobs, refit, theme=Path(theme) if theme else None, cluster=cluster
    )
    try:
        summary = run_build(options, progress=progress)
    except OSError as exc:  # as the command reports it: nothing was published
        raise ConfigError(f"{exc.strerror or exc}: {exc.filename or ''}".rstrip(": ")) from exc
    site = summary.out_dir
    return SiteResult(
        out_dir=site,
        index=site / "index.html",
        datasets=tuple(_outcome(site, o.dataset, o.source, o.status, o.message) for o in summary.outcomes),
        fitted=summary.fitted,
        reused=summary.reused,
        seconds=summary.seconds,
        warnings=summary.warnings,
    )


def _outcome(site: Path, slug: str, source: str, status: str, message: str) -> DatasetOutcome:
    from sitegen.model import from_json  # noqa: PLC0415

    folder = site / "datasets" / slug
    requirements: tuple[Requirement, ...] = ()
    state: RequirementsState = "none"
    try:
        report = from_json((folder / "fit.json").read_text(encoding="utf-8"), light=True)
    except (OSError, ValueError):
        report = None
    if report is not None:
        requirements, state = report.requirements, report.requirements_state
    checked: Status = "error" if status == "error" else "warn" if status == "warn" else "ok"
    page, fit_json = folder / "index.html", folder / "fit.json"
    return DatasetOutcome(slug, source, checked, message, state, requirements, folder, page, fit_json)
