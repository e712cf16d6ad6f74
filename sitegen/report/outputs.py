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

OUTPUT_FILES: tuple[OutputFile, ...] = (
    # --- the site's top level
    OutputFile("index.html", "pages.render_index", "", "site", "page"),
    OutputFile("summary.csv", "files.summary_files", "", "site", "data"),
    OutputFile("summary.json", "files.summary_files", "", "site", "data"),
    OutputFile("summary.xlsx", "files.summary_files", "", "site", "data"),
    OutputFile("history.json", "history.write", "", "site", "data"),
    OutputFile("changes.json", "history.write", "", "site", "data"),
    OutputFile("changes.html", "history.write", "", "site", "page"),
    OutputFile("build.json", "build._Build._write_build_json", "", "site", "data"),
    # --- each dataset's folder, downloads in the order the page lists them
    OutputFile("fit.json", "files.dataset_files", "every number on this page, at full precision", "dataset", "data"),
    OutputFile(
        "coefficients.csv",
        "files.dataset_files",
        "estimates with standard errors, tests and intervals",
        "dataset",
        "data",
    ),
    OutputFile(
        "observations.csv",
        "files.dataset_files",
        "every row: data, fitted value, intervals and influence measures",
        "dataset",
        "data",
    ),
    OutputFile("anova.csv", "files.dataset_files", "the analysis of variance table", "dataset", "data"),
    OutputFile("lines.csv", "files.dataset_files", "the other lines with their intervals", "dataset", "data"),
    OutputFile("calibration.csv", "files.dataset_files", "inverse predictions with their intervals", "dataset", "data"),
    OutputFile("predictions.csv", "files.dataset_files", "predicted values with their intervals", "dataset", "data"),
    OutputFile(
        "agreement.csv",
        "files.dataset_files",
        "the difference analysis: mean difference, limits of agreement and their intervals",
        "dataset",
        "data",
    ),
    OutputFile(
        "bias.csv", "files.dataset_files", "the bias at each decision level with its interval", "dataset", "data"
    ),
    OutputFile(
        "readback.csv",
        "files.dataset_files",
        "every calibration standard read back from the line",
        "dataset",
        "data",
    ),
    OutputFile(
        "weighting.csv",
        "files.dataset_files",
        "the weightings compared and how well each reads the standards back",
        "dataset",
        "data",
    ),
    OutputFile(
        "tables.xlsx", "files.dataset_files", "the tables above in one workbook, a sheet each", "dataset", "data"
    ),
    OutputFile(
        "source-", "files.dataset_files", "the data file exactly as delivered", "dataset", "data", pattern=".csv"
    ),
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
