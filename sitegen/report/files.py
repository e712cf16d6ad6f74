"""The downloadable files of each dataset and of the whole site."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from sitegen.derive import Observations

from sitegen.confine import read_inside
from sitegen.digest import sha256_hex
from sitegen.discover import DatasetSource
from sitegen.errors import OutsideFolderError
from sitegen.jsontext import json_text
from sitegen.model import FitReport, to_json
from sitegen.report import bulkcsv, variation
from sitegen.report.tables import (
    cell_kinds,
    clean_rows,
    columns_to_csv,
    rows_from_columns,
    rows_to_csv_bytes,
    write_large_csv,
)
from sitegen.report.xlsx import Sheet, csv_lines, workbook, workbook_bytes

XLSX_MAX_ROWS = 50_000  # larger observation tables are offered as CSV only
WORKBOOK = "tables.xlsx"  # every table of a dataset, a sheet each
SUMMARY_COLUMNS = (
    "dataset",
    "title",
    "status",
    "n",
    "df_resid",
    "r_squared",
    "adj_r_squared",
    "residual_std_error",
    "f_stat",
    "f_p_value",
    "message",
    "section",
    "source",
    "model",
    "compare_term",
    "estimate",
    "std_error",
    "ci_low",
    "ci_high",
    "level",
    "tags",
    "requirements",
)
COEFFICIENT_COLUMNS = ("term", "estimate", "std_error", "t_stat", "p_value", "ci_low", "ci_high")


def _message(r: FitReport) -> str:
    first = r.first_message("error", "warning", "note")
    return first.text if first else ""


def summary_row(r: FitReport) -> dict[str, Any]:
    """One dataset's row of summary.csv / summary.json."""
    c = r.coefficient(r.compare_term) if r.compare_term else None
    return {
        "dataset": r.dataset,
        "title": r.title,
        "status": r.status,
        "n": r.n,
        "df_resid": r.df_resid,
        "r_squared": r.r_squared,
        "adj_r_squared": r.adj_r_squared,
        "residual_std_error": r.residual_std_error,
        "f_stat": r.f_stat,
        "f_p_value": r.f_p_value,
        "message": _message(r),
        "section": r.section,
        "source": r.source,
        "model": r.model,
        "compare_term": r.compare_term,
        "estimate": c.estimate if c else None,
        "std_error": c.std_error if c else None,
        "ci_low": c.ci_low if c else None,
        "ci_high": c.ci_high if c else None,
        "level": r.level,
        "tags": ";".join(r.tags),
        "requirements": r.requirements_state,
    }


def _message_level(r: FitReport) -> str:
    first = r.first_message("error", "warning", "note")
    return first.level if first else ""


def index_entry(r: FitReport) -> dict[str, Any]:
    """What the index, summaries, tag comparisons and history need of a dataset, as plain JSON values.

    Kept in build.json so that a rebuild can reuse a dataset without parsing its fit.json.
    """
    row = {k: _json_value(v) for k, v in summary_row(r).items()}
    row["tags"] = list(r.tags)
    row["message_level"] = _message_level(r)
    row["pooled_contrast"] = r.pooled_contrast
    row["sidecar_warnings"] = [m.text for m in r.messages if m.level == "warning" and "sidecar key" in m.text]
    row["weights"] = r.weights
    row["residual_sd_y"] = _json_value(r.residual_sd_y)
    row["units"] = dict(r.units)
    row["response"] = r.response
    row["requirement_list"] = [
        {"name": q.name, "met": q.met, "label": q.label, "text": q.text, "at": q.at} for q in r.requirements
    ]
    return row


def report_from_index_entry(entry: dict[str, Any], input_sha256: str) -> FitReport:
    """A light report (no per-row or chart data) from :func:`index_entry`'s values."""
    from sitegen.model import Coefficient, Message, Requirement  # noqa: PLC0415

    nan = float("nan")

    def num(key: str) -> float:  # a fitted report holds floats; JSON null stood for NaN
        v = entry.get(key)
        return nan if v is None else float(v)

    coefficients: tuple[Coefficient, ...] = ()
    if entry.get("compare_term") and entry.get("estimate") is not None:
        coefficients = (
            Coefficient(
                str(entry["compare_term"]), float(entry["estimate"]), num("std_error"),
                nan, nan, num("ci_low"), num("ci_high"),
            ),
        )  # fmt: skip
    messages: tuple[Message, ...] = (
        (Message(entry["message_level"], str(entry["message"])),) if entry.get("message") else ()
    )
    messages += tuple(
        Message("warning", str(w)) for w in entry.get("sidecar_warnings", ()) if str(w) != entry.get("message")
    )
    requirements = tuple(
        Requirement(
            name=str(q["name"]), met=bool(q["met"]), value=None, limit=None, text=str(q["text"]),
            label=str(q.get("label", "")), at=q.get("at"),
        )
        for q in entry.get("requirement_list", ())
    )  # fmt: skip
    return FitReport(
        dataset=str(entry["dataset"]),
        source=str(entry["source"]),
        section=str(entry["section"]),
        title=str(entry["title"]),
        status=entry["status"],
        model=str(entry["model"]),
        level=float(entry["level"]),
        tags=tuple(entry["tags"]),
        n=entry["n"],
        df_resid=entry["df_resid"],
        r_squared=num("r_squared"),
        adj_r_squared=num("adj_r_squared"),
        residual_std_error=num("residual_std_error"),
        f_stat=num("f_stat"),
        f_p_value=num("f_p_value"),
        compare_term=entry.get("compare_term"),
        coefficients=coefficients,
        messages=messages,
        input_sha256=input_sha256,
        requirements=requirements,
        pooled_contrast=bool(entry.get("pooled_contrast", False)),
        weights=entry.get("weights"),
        residual_sd_y=entry.get("residual_sd_y"),
        units=tuple(sorted((str(k), str(v)) for k, v in (entry.get("units") or {}).items())),
        response=str(entry.get("response", "")),
    )


def _json_value(v: Any) -> Any:
    if isinstance(v, float) and not np.isfinite(v):
        return None
    return v


#: The site-wide tables :func:`summary_files` writes.
SUMMARY_FILES = ("summary.csv", "summary.json", "summary.xlsx")


def summary_files(work: Path, reports: Sequence[FitReport]) -> None:
    """summary.csv, summary.json and summary.xlsx."""
    rows = [summary_row(r) for r in reports]
    header, cells = clean_rows(SUMMARY_COLUMNS, [[row[c] for c in SUMMARY_COLUMNS] for row in rows])
    (work / "summary.csv").write_bytes(rows_to_csv_bytes(header, cells))
    (work / "summary.xlsx").write_bytes(workbook_bytes(header, cells, "summary"))
    body = [{k: _json_value(v) for k, v in row.items()} for row in rows]
    (work / "summary.json").write_text(json_text(body), encoding="utf-8")


def _table(folder: Path, name: str, columns: Sequence[str], rows: Sequence[Sequence[Any]], book: list[Sheet]) -> str:
    """Write ``name``.csv; the table also goes into the dataset's workbook."""
    header, cells = clean_rows(columns, rows)
    (folder / f"{name}.csv").write_bytes(rows_to_csv_bytes(header, cells))
    book.append((name, header, cells))
    return f"{name}.csv"


def _observations(folder: Path, obs: Observations, book: list[Sheet]) -> str:
    n = len(obs.values[0]) if obs.values else 0
    if n > XLSX_MAX_ROWS:  # large: written in chunks, not in the workbook
        if bulkcsv.can_write(obs.values):
            bulkcsv.write_csv(obs.columns, obs.values, folder / "observations.csv")
        else:  # yes/no or mixed cells: pandas, slower
            write_large_csv(obs.columns, obs.values, folder / "observations.csv")
        return "observations.csv"
    header, _ = clean_rows(obs.columns, [])
    text = columns_to_csv(header, obs.values)
    cells: list[list[Any]] | None = None
    if text is None:
        cells = rows_from_columns(obs.values)
        text = rows_to_csv_bytes(header, cells)
    (folder / "observations.csv").write_bytes(text)
    kinds = cell_kinds(obs.values)
    lines = csv_lines(text.decode("utf-8"), kinds) if kinds is not None else None
    if lines is None:  # the sheet reuses the CSV's text where it can
        book.append(("observations", header, cells if cells is not None else rows_from_columns(obs.values)))
    else:
        book.append(("observations", header, lines))
    return "observations.csv"


AGREEMENT_COLUMNS = (
    "scale",
    "n",
    "mean_difference",
    "mean_difference_ci_low",
    "mean_difference_ci_high",
    "sd_difference",
    "limit_low",
    "limit_low_ci_low",
    "limit_low_ci_high",
    "limit_high",
    "limit_high_ci_low",
    "limit_high_ci_high",
    "limit_se",
    "multiplier",
    "trend_slope",
    "trend_slope_ci_low",
    "trend_slope_ci_high",
    "trend_p_value",
)
BIAS_COLUMNS = ("at", "estimate", "ci_low", "ci_high", "percent", "percent_ci_low", "percent_ci_high", "line")
WEIGHTING_COLUMNS = ("weighting", "slope", "intercept", "sum_abs_percent", "max_abs_percent", "chosen")
READBACK_COLUMNS = ("nominal", "replicate", "found", "percent", "level_replicates", "level_found", "level_percent")


def _purpose_tables(folder: Path, r: FitReport, book: list[Sheet]) -> list[str]:
    """The comparison's and the calibration's tables, where the report has them."""
    files = []
    agreements = [a for a in (r.agreement, r.agreement_percent) if a is not None]
    if agreements:
        rows = [[getattr(a, c) for c in AGREEMENT_COLUMNS] for a in agreements]
        files.append(_table(folder, "agreement", AGREEMENT_COLUMNS, rows, book))
    if r.bias:
        files.append(
            _table(folder, "bias", BIAS_COLUMNS, [[getattr(b, c) for c in BIAS_COLUMNS] for b in r.bias], book)
        )
    if r.back_calculated:
        rows = [
            [b.nominal, i, found, pct, b.replicates, b.found, b.percent]
            for b in r.back_calculated
            for i, (found, pct) in enumerate(zip(b.found_each, b.percent_each, strict=True), start=1)
        ]
        files.append(_table(folder, "readback", READBACK_COLUMNS, rows, book))
    if r.weighting_options:
        rows = [[getattr(o, c) for c in WEIGHTING_COLUMNS] for o in r.weighting_options]
        files.append(_table(folder, "weighting", WEIGHTING_COLUMNS, rows, book))
    return files


CAUTION = (
    "Results computed automatically from the files as delivered. Before a result is used for a decision that "
    "affects health, safety or compliance, check it against your laboratory's validated method, the regulations "
    "that apply to you and the judgement of accredited or licensed staff."
)


def about_rows(r: FitReport) -> list[list[Any]]:
    """The workbook's metadata sheet: where the numbers come from, their level and units, who answers for them."""
    from sitegen import __version__  # noqa: PLC0415

    rows: list[list[Any]] = [
        ["dataset", r.dataset],
        ["title", r.title],
        ["source file", r.source],
        ["input SHA-256", r.input_sha256],
        ["model", r.model],
        ["fit", f"weighted least squares, weights from column {r.weights}" if r.weights else "ordinary least squares"],
        ["confidence level of every interval (ci_*, mean_ci_*, pred_*)", r.level],
    ]
    rows += [[f"unit of {column}", unit] for column, unit in r.units]
    rows += [[key.replace("_", " "), value] for key, value in r.responsible]
    rows += [[f"row {row} left out", why] for row, why in r.excluded_rows]
    rows += [["made by", f"sitegen {__version__}"], ["caution", CAUTION]]
    return rows


def _source_copy(src: DatasetSource, r: FitReport, max_bytes: int | None) -> bytes | None:
    """The CSV's bytes to offer for download: only a file that was read for fitting (inside the data folder,
    within the size limit) and still holds the bytes that were fitted."""
    if not r.input_sha256:  # refused unread: outside the data folder, over the size limit, not a plain file
        return None
    try:
        raw = read_inside(src.csv_path, src.root, max_bytes)
    except (OSError, OutsideFolderError):
        return None
    return raw if sha256_hex(raw) == r.input_sha256 else None


@dataclass(frozen=True, slots=True)
class Downloads:
    """What :func:`dataset_files` wrote: the files' names, and the SHA-256 of the fit.json written."""

    names: tuple[str, ...]
    fit_sha256: str


def dataset_files(
    folder: Path,
    r: FitReport,
    obs: Observations | None,
    src: DatasetSource,
    offer_source: bool,
    *,
    max_bytes: int | None = None,
) -> Downloads:
    """Write a dataset's downloads into its folder; returns their names and fit.json's hash (taken from the
    bytes written, rather than by reading the file back)."""
    text = to_json(r).encode("utf-8")  # LF line ends on every system, as the CSV files
    (folder / "fit.json").write_bytes(text)
    names = _downloads(folder, r, obs, src, offer_source=offer_source, max_bytes=max_bytes)
    return Downloads(tuple(names), sha256_hex(text))


def _downloads(
    folder: Path,
    r: FitReport,
    obs: Observations | None,
    src: DatasetSource,
    *,
    offer_source: bool,
    max_bytes: int | None,
) -> list[str]:
    """Every download but fit.json (written already); returns the names, fit.json's included."""
    files = ["fit.json"]
    raw = _source_copy(src, r, max_bytes) if offer_source else None
    if raw is not None:
        # Named by slug: the original name may hold '#', '?' or bytes that are not UTF-8, which
        # would break the link on the page (the page shows the original name as the link text).
        name = f"source-{src.slug}.csv"
        try:
            (folder / name).write_bytes(raw)
            files.append(name)
        except OSError:
            pass
    if r.status == "error":
        return sorted(files)
    book: list[Sheet] = []
    coef_rows = [[getattr(c, k) for k in COEFFICIENT_COLUMNS] for c in r.coefficients]
    extra = ("robust_std_error", "robust_ci_low", "robust_ci_high", "robust_p_value")
    if r.coefficients and r.coefficients[0].robust_std_error is not None:
        coef_rows = [row + [getattr(c, k) for k in extra] for row, c in zip(coef_rows, r.coefficients, strict=True)]
        files.append(_table(folder, "coefficients", COEFFICIENT_COLUMNS + extra, coef_rows, book))
    else:
        files.append(_table(folder, "coefficients", COEFFICIENT_COLUMNS, coef_rows, book))
    files.append(_table(folder, "anova", variation.COLUMNS, variation.rows(r), book))
    if r.lines:
        cols: tuple[str, ...] = (
            "method",
            "slope",
            "intercept",
            "slope_ci_low",
            "slope_ci_high",
            "intercept_ci_low",
            "intercept_ci_high",
            "interval_method",
            "label",
        )
        files.append(_table(folder, "lines", cols, [[getattr(ln, c) for c in cols] for ln in r.lines], book))
    if r.calibration:
        cal_cols = (
            "response",
            "estimate",
            "std_error",
            "ci_low",
            "ci_high",
            "readings",
            "method",
            "bounded",
            "extrapolated",
        )
        cal_rows = [[getattr(c, k) for k in cal_cols] for c in r.calibration]
        files.append(_table(folder, "calibration", cal_cols, cal_rows, book))
    if r.predictions:
        names = sorted({k for p in r.predictions for k, _ in p.at})
        pred_cols = ("fitted", "std_error", "mean_ci_low", "mean_ci_high", "pred_low", "pred_high", "extrapolated")
        rows = [[dict(p.at).get(n) for n in names] + [getattr(p, c) for c in pred_cols] for p in r.predictions]
        files.append(_table(folder, "predictions", (*names, *pred_cols), rows, book))
    files += _purpose_tables(folder, r, book)
    if obs is not None:
        files.append(_observations(folder, obs, book))
    about_header, about_cells = clean_rows(("field", "value"), about_rows(r))  # text neutralised as in every sheet
    book.insert(0, ("about", about_header, about_cells))
    (folder / WORKBOOK).write_bytes(workbook(book))
    files.append(WORKBOOK)
    return sorted(files)
