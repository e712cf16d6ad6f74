"""Fit one dataset: sidecar → table → design → statistics → :class:`FitReport`.

This is the unit of work the executor runs, possibly in another process, so it
takes and returns plain picklable data. A :class:`DatasetError` becomes an
error report for this dataset; any other exception is caught too (so one
dataset can never stop a build) and reported as an internal error with its
traceback kept for ``--debug``.
"""

from __future__ import annotations

import traceback
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from sitegen import derive
from sitegen.derive import Observations
from sitegen.digest import sha256_hex
from sitegen.discover import DatasetSource
from sitegen.errors import (
    INTERNAL_ERROR_WORDS,
    DatasetError,
    FitError,
    FormulaError,
    SidecarUnreadableError,
    WholeFileFormulaError,
)
from sitegen.formula import Design, assumed_formula, build_design
from sitegen.load import LoadedTable, read_source, read_table
from sitegen.model import AnovaLine, Coefficient, FitReport, Message, Status
from sitegen.purposes import choose_weights
from sitegen.requirements import judge
from sitegen.spec import STREAM_ABOVE_MEGABYTES, WHOLE_WITH_KEYS_BELOW_MEGABYTES, DatasetSpec, Limits, read_sidecar
from sitegen.stats import ext
from sitegen.stats.ols import OlsFit, anova_table, fit_ols
from sitegen.stats.soundness import RESCALE, data_problem, figures_problem
from sitegen.stats.text import p_text
from sitegen.table import to_float


@dataclass(frozen=True, slots=True)
class FitTask:
    """Everything a worker needs to fit one dataset."""

    source: DatasetSource
    defaults: tuple[tuple[str, Any], ...]
    limits: Limits
    folder: Path | None = None  # the dataset's output folder: a file read in chunks writes observations.csv there


@dataclass(frozen=True, slots=True)
class DatasetResult:
    """What a worker returns: the report, the per-row table and, on an internal error, a traceback."""

    report: FitReport
    observations: Observations | None
    debug_trace: str | None = None
    transient: bool = False  # the CSV or sidecar could not be read (an OSError): tried again, never kept
    written: tuple[str, ...] = ()  # files already written into the dataset's folder (a fit made in chunks)


def error_report(src: DatasetSource, text: str = "") -> FitReport:
    """The report of a dataset that could not be fitted (with ``text`` as its error, when given)."""
    base = FitReport(
        dataset=src.slug,
        source=src.relpath,
        section=src.section,
        title=Path(src.relpath).stem,
        status="error",
        model="",
        level=0.95,
    )
    return replace(base, messages=(Message("error", text),)) if text else base


def analyze(task: FitTask) -> DatasetResult:
    """Fit one dataset; never raises, except :class:`MemoryError` (the worker running it reports the memory
    bound). Floating-point overflow and the like print nothing: figures that are not finite are caught by
    ``stats/soundness.py`` and reported in the dataset's own words."""
    import warnings  # noqa: PLC0415

    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return _analyze(task)


def _read_error(src: DatasetSource, base: FitReport, exc: OSError) -> DatasetResult:
    import errno  # noqa: PLC0415

    why = {
        errno.ENAMETOOLONG: "its path is too long for the file system; move it to a folder with a shorter path",
        errno.EACCES: "there is no permission to read it; ask for read access or move it",
        errno.ELOOP: "it is a symbolic link that loops; remove or correct the link",
    }.get(exc.errno or 0, "it may have been moved or deleted during the build")
    msg = f"{src.relpath} cannot be read: {exc.strerror or exc} ({why})"
    return DatasetResult(replace(base, messages=(Message("error", msg),)), None, transient=True)


def reads_in_chunks(size: int, spec: DatasetSpec, limits: Limits, *, wide: bool = False) -> bool:
    """Whether a file of ``size`` bytes is read and fitted in chunks: from ``stream_above_megabytes`` on (the
    sidecar's, else the site's). With the built-in threshold, a file below ``WHOLE_WITH_KEYS_BELOW_MEGABYTES``
    whose sidecar asks for what only the whole-file fit offers (weights, groups, lines…), or that is UTF-16 or
    UTF-32 text (``wide``, which only the whole-file reader converts), is read whole."""
    from sitegen.stream.fit import unsupported  # noqa: PLC0415

    threshold = limits.stream_above_megabytes
    if spec.stream_above_megabytes is not None:
        threshold = spec.stream_above_megabytes  # the sidecar's, for its dataset
    if size < threshold * 1e6:
        return False
    return not _may_read_whole(size, spec, limits) or not (wide or unsupported(spec))


def _may_read_whole(size: int, spec: DatasetSpec, limits: Limits) -> bool:
    """Whether a file above the chunk threshold may still be read whole when it needs to be: the threshold is
    the built-in one (not chosen in site.toml or the sidecar) and the file is under the former threshold."""
    chosen = spec.stream_above_megabytes is not None or limits.stream_above_megabytes != STREAM_ABOVE_MEGABYTES
    return not chosen and size < WHOLE_WITH_KEYS_BELOW_MEGABYTES * 1e6


def _in_chunks(task: FitTask, base: FitReport) -> DatasetResult | DatasetSpec | None:
    """The dataset fitted in chunks when its file is at least ``stream_above_megabytes`` (the site's, or its
    sidecar's); else the sidecar as read here, for the whole-file path to use (read once), or None (the file's
    size or the sidecar could not be read: the whole-file path says why)."""
    from sitegen.load import looks_wide  # noqa: PLC0415
    from sitegen.stream.reader import file_head  # noqa: PLC0415

    src = task.source
    sidecar_name = src.relpath[: -len(".csv")] + ".toml"
    try:
        size, head = file_head(src.csv_path, src.root, src.relpath)
    except (OSError, DatasetError):
        return None  # the whole-file path reports it in its words
    spec = None
    try:
        spec = read_sidecar(src.sidecar_path, dict(task.defaults), sidecar_name, src.root)
    except DatasetError:
        return None
    if not reads_in_chunks(size, spec, task.limits, wide=looks_wide(head, spec.encoding)):
        return spec
    threshold = task.limits.stream_above_megabytes
    if spec.stream_above_megabytes is not None:
        threshold = spec.stream_above_megabytes  # the sidecar's, for its dataset
    try:
        base = replace(
            base,
            title=spec.title or base.title,
            description=spec.description,
            tags=spec.tags,
            level=spec.level,
            units=spec.units,
            responsible=_responsible(spec),
        )
        from sitegen.stream.fit import fit_in_chunks  # noqa: PLC0415

        done = fit_in_chunks(base, spec, task.limits, src.csv_path, src.root, task.folder, threshold)
        return DatasetResult(done.report, None, written=done.written)
    except OSError as exc:
        return _read_error(src, base, exc)
    except DatasetError as exc:
        if isinstance(exc, WholeFileFormulaError) and _may_read_whole(size, spec, task.limits):
            return spec  # categorical or centred terms (found in the first chunk): read whole, as before
        messages = [*_spec_messages(spec, sidecar_name), Message("error", str(exc))]
        return DatasetResult(replace(base, messages=tuple(messages)), None)


def _analyze(task: FitTask) -> DatasetResult:
    src = task.source
    title = Path(src.relpath).stem
    base = error_report(src)
    chunked = _in_chunks(task, base)
    if isinstance(chunked, DatasetResult):
        return chunked
    try:
        raw = read_source(src.csv_path, task.limits, src.relpath, src.root)  # refuses a file over the size limit unread
    except OSError as exc:
        return _read_error(src, base, exc)
    except DatasetError as exc:
        return DatasetResult(replace(base, messages=(Message("error", str(exc)),)), None)
    base = replace(base, input_sha256=sha256_hex(raw))
    spec: DatasetSpec | None = None
    sidecar_name = src.relpath[: -len(".csv")] + ".toml"
    try:
        # the sidecar as read to choose the reading (once), or read here to say why it could not be
        spec = (
            chunked
            if chunked is not None
            else read_sidecar(src.sidecar_path, dict(task.defaults), sidecar_name, src.root)
        )
        base = replace(
            base,
            title=spec.title or title,
            description=spec.description,
            tags=spec.tags,
            level=spec.level,
            units=spec.units,
        )
        table = read_table(raw, spec, task.limits, src.relpath)
        del raw  # the file's bytes are not needed again (a large file's 20 bytes a row)
        base = replace(base, responsible=_responsible(spec))
        return _fit(base, spec, table)
    except DatasetError as exc:
        messages = [*_spec_messages(spec, sidecar_name), Message("error", str(exc))]
        # a sidecar the system could not read, like a CSV, is tried again and never kept as the input's state
        transient = isinstance(exc, SidecarUnreadableError)
        return DatasetResult(replace(base, messages=tuple(messages)), None, transient=transient)
    except MemoryError:
        raise
    except Exception as exc:
        if isinstance(exc, ImportError | OSError) and any(w in str(exc).lower() for w in ("memory", "failed to map")):
            raise MemoryError(str(exc)) from exc  # a library could not be loaded within the memory bound
        text = (
            f"sitegen could not process {src.relpath} {INTERNAL_ERROR_WORDS} "
            f"({type(exc).__name__}: {exc}); please report it with the file"
        )
        return DatasetResult(replace(base, messages=(Message("error", text),)), None, traceback.format_exc())


def _responsible(spec: DatasetSpec) -> tuple[tuple[str, str], ...]:
    named = (("analyst", spec.analyst), ("reviewer", spec.reviewer), ("method_reference", spec.method_reference))
    return tuple((k, v.strip()) for k, v in named if v and v.strip())


def _leave_out(
    spec: DatasetSpec, table: LoadedTable, sidecar: str
) -> tuple[LoadedTable, list[int], tuple[tuple[int, str], ...]]:
    """The table without the rows the sidecar leaves out (the CSV file itself is never changed), the rows
    leave_out names that the CSV does not have, and the rows left out with their reasons."""
    if not spec.leave_out:
        return table, [], ()
    wanted = dict(spec.leave_out)
    present = set(table.table.rows.tolist())
    missing = sorted(r for r in wanted if r not in present)
    keep = np.array([r not in wanted for r in table.table.rows.tolist()], dtype=bool)
    if not bool(keep.any()):
        raise FitError(f"{sidecar}: leave_out removes every row; there is nothing left to fit")
    excluded = tuple((r, why) for r, why in spec.leave_out if r in present)
    return replace(table, table=table.table.take(keep)), missing, excluded


def _spec_messages(spec: DatasetSpec | None, sidecar_name: str) -> list[Message]:
    if spec is None:
        return []
    from sitegen.spec import MAX_UNKNOWN_SHOWN, unknown_key  # noqa: PLC0415

    out = []
    for key, hint in spec.unknown_keys[:MAX_UNKNOWN_SHOWN]:
        text = unknown_key(sidecar_name, key, hint, what="sidecar key", ending=" was ignored")
        out.append(Message("warning", text if hint else f"{text}; see the README for the keys a sidecar may hold"))
    more = len(spec.unknown_keys) - MAX_UNKNOWN_SHOWN
    if more > 0:
        out.append(Message("warning", f"{sidecar_name}: {more:,} more unknown sidecar keys were ignored"))
    return out


def _model_formula(spec: DatasetSpec, table: LoadedTable, name: str) -> tuple[str, bool]:
    if spec.model:
        return spec.model, False
    guess = assumed_formula(table.table)
    if guess is None:
        cols = ", ".join(table.table.names)
        raise FormulaError(
            f"{name} has no model: without a sidecar only a table of exactly two numeric columns can be fitted",
            hint=f'add {Path(name).stem}.toml with e.g. model = "y ~ x"; the columns are {cols}',
        )
    return guess, True


def _fit(base: FitReport, spec: DatasetSpec, table: LoadedTable) -> DatasetResult:
    name = base.source
    sidecar = base.source[: -len(".csv")] + ".toml"
    n_read = len(table.table)
    whole = table
    table, missing, excluded = _leave_out(spec, table, sidecar)
    formula, assumed = _model_formula(spec, table, name)
    extra = tuple(c for c in (spec.weights, spec.group) if c)
    design = build_design(formula, table.table, name, extra)
    weights = _weights(design, spec)
    problem = data_problem(design.response, design.y, design.terms, design.X, design.has_intercept)
    if problem:
        raise FitError(f"{name}: {problem}", hint=RESCALE if "compute with" in problem else None)
    weighting = choose_weights(design, spec, derive.straight_line(design))
    if weighting is not None:
        weights = weighting.weights
    fit = fit_ols(
        design.X_ext,
        design.y_ext,
        design.terms,
        has_intercept=design.has_intercept,
        level=spec.level,
        weights=weights,
    )
    if ext.needs_double_double(fit.condition):  # badly conditioned: design and fit again in double-double
        with ext.forced(ext.DOUBLE_DOUBLE):
            return _fit(base, spec, whole)  # the table as read: leave_out is applied again there
    messages = _spec_messages(spec, sidecar)
    messages += derive.input_messages(
        sidecar=sidecar,
        assumed=formula if assumed else None,
        notes=table.notes,
        rows_read=n_read,
        missing=missing,
        excluded=excluded,
        dropped=design.dropped,
        dropped_total=len(design.dropped),
    )
    pieces = derive.compute(design, fit, spec, weights, weighting=weighting.name if weighting else None)
    messages += pieces.messages
    groups = pieces.groups
    pooled_contrast = bool(
        groups is not None and groups.p_value is not None and groups.p_value < 1 - spec.level  # NaN: False
    )
    if pooled_contrast and groups is not None and groups.p_value is not None:
        messages.insert(
            0,
            Message(
                "warning",
                f"The slopes differ between the groups of {groups.column} "
                f"({p_text(groups.p_value)}): the pooled line is not the recommended one "
                f"and is shown only as a contrast; use each {groups.column}'s own line.",
            ),
        )
    report = replace(
        with_fit(base, fit, pieces.robust_se),
        model=formula,
        model_assumed=assumed,
        response=design.response,
        terms=design.terms,
        variables=design.variables,
        weights=spec.weights,
        n_rows=n_read,
        excluded_rows=excluded,
        dropped_rows=design.dropped,
        messages=tuple(messages),
        diagnostics=pieces.diagnostics,
        flagged=pieces.flagged,
        flagged_total=pieces.flagged_total,
        group_flagged=pieces.group_flagged,
        group_flagged_total=pieces.group_flagged_total,
        cutoffs=pieces.cutoffs,
        lines=pieces.lines,
        lines_text=pieces.lines_text,
        calibration=pieces.calibration,
        limits=pieces.limits,
        predictions=pieces.predictions,
        claims=pieces.claims,
        groups=pieces.groups,
        pooled_contrast=pooled_contrast,
        chart=pieces.chart,
        reading=(("delimiter", table.delimiter), ("decimal", table.decimal), ("encoding", table.encoding)),
        purpose=spec.purpose,
        agreement=pieces.comparison.agreement,
        agreement_percent=pieces.comparison.agreement_percent,
        bias=pieces.comparison.bias,
        bias_line=pieces.comparison.bias_line,
        bias_reason=pieces.comparison.bias_reason,
        comparison_text=pieces.comparison.text,
        back_calculated=pieces.calibration_parts.back_calculated,
        weighting=weighting.name if weighting else None,
        weighting_options=weighting.options if weighting else (),
        weighting_reason=weighting.reason if weighting else "",
        linearity=pieces.calibration_parts.linearity,
        working_range=pieces.calibration_parts.working_range,
    )
    report = settled(report, spec)
    if weights is not None and fit.df_resid > 0:
        report = replace(report, residual_sd_y=float(np.sqrt(np.sum(fit.resid**2) / fit.df_resid)))
    if spec.requirements is not None:
        evidence = derive.acceptance_evidence(design, fit, spec, lines=report.lines, weighted=weights is not None)
        found = judge(report, spec.requirements, evidence)
        report = replace(report, requirements=found)
    return DatasetResult(report, pieces.observations)


def _weights(design: Design, spec: DatasetSpec) -> NDArray[np.float64] | None:
    if not spec.weights:
        return None
    w = to_float(design.data[spec.weights])[0]
    bad = ~np.isfinite(w) | (w <= 0)
    if bool(bad.any()):
        row = int(design.rows[np.flatnonzero(bad)[0]])
        raise FitError(f"weights column {spec.weights!r} must hold positive numbers; row {row} does not")
    return w


def settled(report: FitReport, spec: DatasetSpec) -> FitReport:
    """The last step of a report, for a file read whole or in chunks: its status from its messages and checks
    and the term its comparison reads; raises :class:`FitError` when its figures cannot be trusted and
    :class:`FormulaError` when ``compare`` names no term of the model."""
    warned = any(m.level in ("warning", "error") for m in report.messages) or any(d.flag for d in report.diagnostics)
    status: Status = "warn" if warned else "ok"
    compare_term = spec.compare or next((t for t in report.terms if t != "Intercept"), None)
    report = replace(report, status=status, compare_term=compare_term)
    coefficients = [(c.term, c.estimate, c.std_error, c.ci_low, c.ci_high) for c in report.coefficients]
    problem = figures_problem(report.r_squared, report.residual_std_error, coefficients)
    if problem:
        raise FitError(f"{report.source}: the figures of this fit cannot be trusted: {problem}", hint=RESCALE)
    if compare_term and report.coefficient(compare_term) is None:
        raise FormulaError(
            f"{report.source[: -len('.csv')]}.toml: compare = {spec.compare!r} is not a term of the model",
            hint=f"choose one of {', '.join(report.terms)}",
        )
    return report


def with_fit(report: FitReport, fit: OlsFit, robust_se: NDArray[np.float64] | None) -> FitReport:
    """``report`` with the fit's own figures: counts, R², the F test, condition, coefficients and ANOVA
    (the same for a file read whole or in chunks)."""
    return replace(
        report,
        n=fit.n,
        df_model=fit.df_model,
        df_resid=fit.df_resid,
        r_squared=fit.r_squared,
        adj_r_squared=fit.adj_r_squared,
        residual_std_error=fit.sigma,
        f_stat=fit.f_stat,
        f_p_value=fit.f_p_value,
        condition_number=fit.condition,
        coefficients=_coefficients(fit, robust_se),
        anova=tuple(AnovaLine(a.source, a.df, a.sum_sq, a.mean_sq, a.f_stat, a.p_value) for a in anova_table(fit)),
    )


def _coefficients(fit: OlsFit, robust_se: NDArray[np.float64] | None) -> tuple[Coefficient, ...]:
    from sitegen.stats.distributions import t_sf  # noqa: PLC0415

    out = []
    for i, term in enumerate(fit.terms):
        c = Coefficient(
            term,
            float(fit.beta[i]),
            float(fit.std_error[i]),
            float(fit.t_stat[i]),
            float(fit.p_value[i]),
            float(fit.ci_low[i]),
            float(fit.ci_high[i]),
        )
        if robust_se is not None:
            se = float(robust_se[i])
            t = c.estimate / se if se > 0 else float("nan")
            c = replace(
                c,
                robust_std_error=se,
                robust_ci_low=c.estimate - fit.t_crit * se,
                robust_ci_high=c.estimate + fit.t_crit * se,
                robust_p_value=float(2 * t_sf(abs(t), fit.df_resid)),
            )
        out.append(c)
    return tuple(out)
