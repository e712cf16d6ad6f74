"""What a dataset page shows, worked out once in Python: the view model its section templates read.

Section templates (see :mod:`sitegen.report.sections`) read these typed fields and the report's own; anything
that needs a decision (which warnings a check already states, how many points a chart draws, which files to
offer) is decided here, not in a template.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from sitegen.formula import plain_column
from sitegen.model import FitReport, Message, check_warning
from sitegen.report import fmt
from sitegen.report.charts import axis_label, influence_limit
from sitegen.report.outputs import CHART_IMAGES, OUTPUT_FILES
from sitegen.report.sections import Section, shown_sections
from sitegen.report.variation import Part as VariationPart
from sitegen.report.variation import parts


@dataclass(frozen=True, slots=True)
class Neighbour:
    """The previous or next dataset in the site's order."""

    dataset: str
    title: str


@dataclass(frozen=True, slots=True)
class Download:
    """A file offered for download: its name in the dataset's folder, the link text and what it holds."""

    href: str
    label: str
    what: str


@dataclass(frozen=True, slots=True)
class SampleNote:
    """How many rows the charts of a large dataset draw, out of how many."""

    n_total: int
    drawn: int
    drawn_flagged: int
    flagged_total: int
    density: bool  # the line chart shades a grid of all rows behind the points


@dataclass(frozen=True, slots=True)
class DatasetView:
    """Everything a dataset page's sections read."""

    report: FitReport
    sections: tuple[Section, ...]
    failed: bool
    errors: tuple[str, ...]  # why the dataset could not be fitted
    sentence: str
    notes: tuple[Message, ...]  # warnings and notes that no check restates
    checks_flagged: int
    claims_rejected: int  # declared claims the data contradict
    requirements_unmet: int  # declared requirements not met
    charts: Mapping[str, Mapping[str, Any]]  # chart specs by kind, handed to the chart macro as they are
    has_line_chart: bool
    sample: SampleNote | None
    x_label: str
    fit_caption: str
    resid_unit: str  # the unit of the residuals (the response's), or ""
    pull_limit: float | None  # the limit the influence check uses, drawn on the pull chart
    variation: tuple[VariationPart, ...]  # the analysis of variance, read from the top
    cutoffs: Mapping[str, float]
    downloads: tuple[Download, ...]
    prev: Neighbour | None
    next: Neighbour | None
    x_unit: str = ""  # the unit of the one predictor (nominal or reference value), or ""
    y_unit: str = ""  # the unit of the response (also quoted as Q("...")), or ""
    coefficient_units: tuple[str, ...] = ()  # each coefficient's unit, in the table's order ("" unknown)


def sentence(r: FitReport) -> str:
    """The fit in plain words, followed by what contradicts the user's own declarations (unmet requirements,
    claims the data reject), so that the headline never reads as sound beside a contradicted claim."""
    text = _groups_sentence(r) if r.pooled_contrast else _fit_sentence(r)
    if r.requirements:
        unmet = [q for q in r.requirements if not q.met]
        if len(r.requirements) == 1:
            text += f" The declared requirement {r.requirements[0].name} is {'met' if not unmet else 'not met'}."
        elif unmet:
            text += (
                f" {len(unmet)} of {len(r.requirements)} declared requirements "
                f"{'is' if len(unmet) == 1 else 'are'} not met ({unmet_words(r)})."
            )
        else:
            text += f" All {len(r.requirements)} declared requirements are met."
    rejected = [c for c in r.claims if c.rejected]
    if rejected:
        names = "; ".join(f"“{c.claim}”" for c in rejected)
        text += f" The data contradict the declared claim{'s' if len(rejected) > 1 else ''} {names}."
    return text


def unmet_words(r: FitReport) -> str:
    """The declared requirements not met, by name ("max_residual_sd, max_bias at 1"), or ""."""
    unmet = [q for q in r.requirements if not q.met]
    return ", ".join(q.name + (f" at {fmt.given(q.at)}" if q.at is not None else "") for q in unmet)


def _groups_sentence(r: FitReport) -> str:
    """Per-group lines lead when their slopes differ; the pooled line is named only as a contrast."""
    g = r.groups
    if g is None:
        return _fit_sentence(r)
    units = dict(r.units)
    x = r.chart.x if r.chart and r.chart.x else "x"
    y_unit = f" {units[r.response]}" if r.response in units else ""
    per = f" per {units[x]}" if x in units else ""
    lvl = fmt.level(r.level)
    each = "; ".join(
        f"{line.group}: {fmt.num(line.slope)}{y_unit}{per} ({lvl} interval {fmt.num(line.slope_ci_low)} to "
        f"{fmt.num(line.slope_ci_high)}, {fmt.integer(line.n)} rows)"
        for line in g.lines
    )
    return (
        f"The slope of {r.response} on {x} differs between the groups of {g.column} "
        f"({fmt.p_phrase(g.p_value)}), so each group has its own line — slopes {each}. "
        f"The pooled line through all {fmt.integer(r.n)} rows is shown only as a contrast, not as the recommended "
        "line; the checks below are computed on it, and rows are flagged against each group's own line first."
    )


def _fit_sentence(r: FitReport) -> str:
    """The fit stated in one plain sentence (two when the direction of the line is not established)."""
    units = dict(r.units)
    lvl = fmt.level(r.level)
    if "Intercept" in r.terms:
        share = (
            f"the model explains {fmt.percent(r.r_squared)} of the variation in {r.response} "
            f"(R² = {fmt.rsquared(r.r_squared)})"
        )
    else:
        share = (
            f"R² = {fmt.rsquared(r.r_squared)}, measured about zero because the model has no intercept "
            "(it cannot be compared with the R² of a model that has one)"
        )
    y_unit_text = f" {units[r.response]}" if r.response in units else ""
    if r.weights:
        fit_part = (
            f"{share}; fitted by weighted least squares (weights from column {r.weights}), the points scatter about "
            f"it by {fmt.num(r.residual_sd_y)}{y_unit_text} (the standard deviation of the plain residuals, "
            f"y − fitted; the weighted residual scale, {fmt.num(r.residual_std_error)}, is not in "
            f"{r.response}'s units)"
        )
    else:
        fit_part = (
            f"{share}, and the points scatter about it by {fmt.num(r.residual_std_error)}{y_unit_text}"
            " (the typical distance of a row from the line)"
        )
    chart = r.chart
    term = r.compare_term
    c = r.coefficient(term) if term else None
    straight = (
        chart is not None and chart.x is not None and term == chart.x and r.terms in (("Intercept", term), (term,))
    )
    if straight and c is not None and chart is not None and chart.x is not None:
        y_unit = f" {units[r.response]}" if r.response in units else ""
        x_unit = f" {units[chart.x]}" if chart.x in units else ""
        interval = f"{lvl} interval {fmt.num(c.ci_low)} to {fmt.num(c.ci_high)}"
        per = f"for each 1{x_unit} of {chart.x}"
        if c.ci_low > 0 or c.ci_high < 0:
            direction = "rises" if c.estimate > 0 else "falls"
            return (
                f"Across {fmt.integer(r.n)} rows, {r.response} {direction} by {fmt.num(abs(c.estimate))}{y_unit} "
                f"{per} ({interval}); {fit_part}."
            )
        return (
            f"Across {fmt.integer(r.n)} rows, the slope of {r.response} {per} is {fmt.num(c.estimate)}{y_unit}, "
            f"but its {interval} includes zero, so these data do not establish whether {r.response} rises or "
            f"falls with {chart.x}; {fit_part}."
        )
    return f"Across {fmt.integer(r.n)} rows fitted with {r.model}, {fit_part}."


def _unit_of(column: str | None, units: Mapping[str, str], variables: tuple[str, ...]) -> str:
    """The unit of a column named plainly or quoted (``Q("lab result")``), or ""."""
    if not column:
        return ""
    name = plain_column(column, variables)
    return units.get(name, "") if name is not None else ""


def coefficient_units(r: FitReport) -> tuple[str, ...]:
    """Each coefficient's unit from the sidecar's units: the intercept in the response's unit, the slope of a
    plain column (or of its square, ``I(x ** 2)``) in the response's unit per the column's; "" otherwise."""
    units = dict(r.units)
    names = tuple(units)
    y_unit = _unit_of(r.response, units, names)
    out = []
    for c in r.coefficients:
        if c.term == "Intercept":
            out.append(y_unit)
            continue
        power = re.fullmatch(r"I\((.+?)\s*\*\*\s*2\)", c.term)
        x_unit = _unit_of(power.group(1) if power else c.term, units, names)
        if not (x_unit and y_unit):
            out.append("")
        elif power:
            out.append(f"{y_unit} per ({x_unit})²")
        else:
            out.append(f"{y_unit} per {x_unit}")
    return tuple(out)


def downloads(r: FitReport, files: Sequence[str]) -> tuple[Download, ...]:
    """The dataset's files worth offering, described, in the order of the table of output files."""
    out: list[Download] = []
    original = r.source.rsplit("/", 1)[-1]
    for row in OUTPUT_FILES:
        if row.scope != "dataset" or not row.description:
            continue
        for name in files if row.pattern else [row.name] if row.name in files else []:
            if not row.matches(name):
                continue
            if row.name == "source-":
                out.append(Download(name, f"original file ({original})", row.description))
            elif row.name == "chart-":
                if name in CHART_IMAGES:
                    what = f"static image of the chart: {CHART_IMAGES[name]} (for print and mail)"
                    out.append(Download(name, name, what))
            else:
                out.append(Download(name, name, row.description))
    return tuple(out)


def _notes(r: FitReport) -> tuple[Message, ...]:
    """Warnings and notes, less those that restate a flagged check (the check shows them, once)."""
    restated = {check_warning(d) for d in r.diagnostics if d.flag}
    return tuple(m for m in r.messages if m.level != "error" and m not in restated)


def _sample(r: FitReport, has_line_chart: bool) -> SampleNote | None:
    chart = r.chart
    if chart is None or not chart.sampled:
        return None
    drawn_flagged = 0
    if "flag" in chart.point_columns:
        at = chart.point_columns.index("flag")
        drawn_flagged = sum(1 for p in chart.points if p[at] == 1.0)
    return SampleNote(chart.n_total, len(chart.points), drawn_flagged, r.flagged_total, has_line_chart)


def view(
    r: FitReport,
    files: Sequence[str],
    charts: Mapping[str, Mapping[str, Any]],
    prev: Neighbour | None,
    nxt: Neighbour | None,
) -> DatasetView:
    """The view of one dataset's page; ``charts`` are its chart specs (empty when it failed)."""
    errors = tuple(m.text for m in r.messages if m.level == "error")
    failed = r.status == "error" or bool(errors)
    x_label = axis_label(r.chart.x if r.chart else None, dict(r.units))
    fit_caption = (
        f"{r.response} against {x_label}: the fitted line, its {fmt.level(r.level)} confidence band for the mean "
        f"(darker) and prediction band for single readings (lighter)"
        + (", the line of equality y = x (where the methods would agree)" if r.purpose == "comparison" else "")
        + (", and the other lines listed below" if r.lines else "")
        + (
            f"; the pooled line is a contrast only: the slopes differ by {r.groups.column}, so each "
            f"{r.groups.column}'s own line is the one to use"
            if r.pooled_contrast and r.groups
            else ""
        )
        + ("; flagged rows are drawn as larger squares." if r.flagged else ".")
    )
    has_line_chart = "fit" in charts
    return DatasetView(
        report=r,
        sections=shown_sections(failed, r.purpose),
        failed=failed,
        errors=errors,
        sentence="" if failed else sentence(r),
        notes=_notes(r),
        checks_flagged=sum(1 for d in r.diagnostics if d.flag),
        claims_rejected=sum(1 for c in r.claims if c.rejected),
        requirements_unmet=sum(1 for q in r.requirements if not q.met),
        charts=charts,
        has_line_chart=has_line_chart,
        sample=_sample(r, has_line_chart),
        x_label=x_label,
        fit_caption=fit_caption,
        resid_unit=dict(r.units).get(r.chart.y, "") if r.chart else "",
        x_unit=_unit_of(r.chart.x if r.chart else None, dict(r.units), tuple(dict(r.units))),
        y_unit=_unit_of(r.response, dict(r.units), tuple(dict(r.units))),
        coefficient_units=coefficient_units(r) if not failed else (),
        pull_limit=influence_limit(r) if not failed else None,
        variation=tuple(parts(r)) if not failed else (),
        cutoffs=dict(r.cutoffs),
        downloads=downloads(r, files),
        prev=prev,
        next=nxt,
    )
