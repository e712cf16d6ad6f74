"""The one table of a site's output files: what each is, who writes it, where it lives, and whether it is data.

Everything that needs to know a site's files reads this table: the downloads a dataset page offers and their
descriptions (``dataset_view.downloads``), the test that tells a dataset's data files from its page
(:func:`is_data_file`, used when a rebuild keeps or copies a dataset folder), and the tidy step that deletes
what a site no longer has (:func:`site_names`). To add an output file, add its row here; a build that writes a
file the table does not know fails ``tests/test_outputs.py``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

Scope = Literal["site", "dataset"]
Kind = Literal["data", "page"]


@dataclass(frozen=True, slots=True)
class OutputFile:
    """One output file (or, with ``pattern``, a family of them such as ``source-<slug>.csv``)."""

    name: str  # the file name; for a pattern, its fixed start (e.g. "source-")
    writer: str  # the function that writes it
    description: str  # what it holds, as a download's description ("" for files that are not offered)
    scope: Scope  # at the site's top level, or in each dataset's folder
    kind: Kind  # data (a table, fit.json, a copy of the input) or page (HTML and the page's chart images)
    pattern: str = ""  # the file name's end when ``name`` is only its start (e.g. ".csv")

    def matches(self, file_name: str) -> bool:
        if self.pattern:
            return file_name.startswith(self.name) and file_name.endswith(self.pattern)
        return file_name == self.name


#: Static chart images (``static_images = true``): file name -> what the chart shows.
CHART_IMAGES = {
    "chart-fit.svg": "the line and its bands",
    "chart-residual-by-x.svg": "residuals across the range of x",
    "chart-residual-by-fitted.svg": "residuals across the fitted values",
    "chart-residual-percent.svg": "residuals in percent of the fitted value",
    "chart-residual-order.svg": "residuals in CSV row order",
    "chart-shape.svg": "shape of the residuals' scatter",
    "chart-pull.svg": "each row's pull on the line",
    "chart-readback.svg": "the standards read back, in percent of nominal",
    "chart-differences.svg": "differences between the methods against their mean",
    "chart-differences-percent.svg": "differences between the methods in percent of their mean",
}


def _site(name: str, writer: str, kind: Kind) -> OutputFile:
    """A file of the site's top level (none is offered as a dataset's download)."""
    return OutputFile(name, writer, "", "site", kind)


def _table(name: str, description: str, pattern: str = "") -> OutputFile:
    """A download of each dataset folder, written with the others by ``files.dataset_files``."""
    return OutputFile(name, "files.dataset_files", description, "dataset", "data", pattern)


OUTPUT_FILES: tuple[OutputFile, ...] = (
    # --- the site's top level
    _site("index.html", "pages.render_index", "page"),
    _site("summary.csv", "files.summary_files", "data"),
    _site("summary.json", "files.summary_files", "data"),
    _site("summary.xlsx", "files.summary_files", "data"),
    _site("history.json", "history.write", "data"),
    _site("changes.json", "history.write", "data"),
    _site("changes.html", "history.write", "page"),
    _site("build.json", "build._Build._write_build_json", "data"),
    # --- each dataset's folder, downloads in the order the page lists them
    _table("fit.json", "every number on this page, at full precision"),
    _table("coefficients.csv", "estimates with standard errors, tests and intervals"),
    _table("observations.csv", "every row: data, fitted value, intervals and influence measures"),
    _table("anova.csv", "the analysis of variance table"),
    _table("lines.csv", "the other lines with their intervals"),
    _table("calibration.csv", "inverse predictions with their intervals"),
    _table("predictions.csv", "predicted values with their intervals"),
    _table("agreement.csv", "the difference analysis: mean difference, limits of agreement and their intervals"),
    _table("bias.csv", "the bias at each decision level with its interval"),
    _table("readback.csv", "every calibration standard read back from the line"),
    _table("weighting.csv", "the weightings compared and how well each reads the standards back"),
    _table("tables.xlsx", "the tables above in one workbook, a sheet each"),
    _table("source-", "the data file exactly as delivered", ".csv"),
    OutputFile("index.html", "jobs.write_page", "", "dataset", "page"),
    OutputFile(
        "chart-",
        "images.write_chart_images",
        "static image of the chart (for print and mail)",
        "dataset",
        "page",
        pattern=".svg",
    ),
)


def find(file_name: str, scope: Scope) -> OutputFile | None:
    """The table's row for a file of the site's top level or of a dataset folder, if it has one."""
    return next((o for o in OUTPUT_FILES if o.scope == scope and o.matches(file_name)), None)


def is_data_file(file_name: str) -> bool:
    """A dataset folder's download (not its page or the page's chart images); unknown files count as data."""
    row = find(file_name, "dataset")
    return row is None or row.kind == "data"


def site_names() -> frozenset[str]:
    """The file names a site's top level holds (besides the ``assets`` and ``datasets`` folders)."""
    return frozenset(o.name for o in OUTPUT_FILES if o.scope == "site")
