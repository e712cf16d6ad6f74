"""Everything derived from a fitted line besides the coefficients.

Influence measures and model checks, robust standard errors, declared claims,
alternative lines, inverse prediction, predictions, group comparisons, the
per-row table and the numbers the charts draw. Each statistic comes from a pure
function in :mod:`sitegen.stats`; this module only wires them to the sidecar's
requests and turns the results into the report's plain dataclasses.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import DatasetError, FitError
from sitegen.formula import Design, design_for, plain_column
from sitegen.model import (
    AltLine,
    Calibration,
    ChartData,
    ClaimTest,
    DetectionLimits,
    Diagnostic,
    FlaggedPoint,
    GroupComparison,
    Message,
    Prediction,
    check_warning,
)
from sitegen.purposes import (
    CalibrationResults,
    ComparisonResults,
    calibration,
    comparison,
    comparison_bias,
    passing_bablok_line,
    plain_response,
)
from sitegen.requirements import Evidence
from sitegen.spec import DatasetSpec
from sitegen.stats.calibration import DetectionLimits as DetectionLimitsFound
from sitegen.stats.calibration import (
    InversePrediction,
    ReadingVariance,
    detection_limits,
    inverse_predict,
    inverse_predict_wls,
    weighted_detection_limits,
)
from sitegen.stats.checks import Check, Precise, model_checks
from sitegen.stats.claims import check_claims
from sitegen.stats.groups import compare_groups
from sitegen.stats.influence import Influence, PointFlags, flag_points, influence
from sitegen.stats.lines import alternative_lines, explain_lines
from sitegen.stats.ols import OlsFit, bands, fit_ols, row_bands
from sitegen.stats.robust import hc3_cov
from sitegen.stats.solver import LD
from sitegen.table import to_float

FloatArray = NDArray[np.float64]
MAX_CHART_POINTS = 5000  # above this, charts draw a sample plus every flagged point, and a density
SAMPLE_POINTS = 2000
BAND_STEPS = 120
DENSITY_BINS = 60


@dataclass(frozen=True, slots=True)
class Observations:
    """Per-row results for ``observations.csv``, column by column."""

    columns: tuple[str, ...]
    values: tuple[NDArray[np.generic], ...]


@dataclass(frozen=True, slots=True)
class Derived:
    """The derived results of one fit, ready to go into its report."""

    messages: list[Message]
    diagnostics: tuple[Diagnostic, ...]
    flagged: tuple[FlaggedPoint, ...]
    flagged_total: int
    cutoffs: tuple[tuple[str, float], ...]
    robust_se: FloatArray | None
    claims: tuple[ClaimTest, ...]
    lines: tuple[AltLine, ...]
    lines_text: str
    calibration: tuple[Calibration, ...]
    limits: DetectionLimits | None
    predictions: tuple[Prediction, ...]
    groups: GroupComparison | None
    chart: ChartData
    observations: Observations
    comparison: ComparisonResults
    calibration_parts: CalibrationResults
    group_flagged: tuple[FlaggedPoint, ...] = ()
    group_flagged_total: int = 0


def single_predictor(design: Design) -> str | None:
    """The one data column on the right-hand side, if there is exactly one."""
    response_cols = [v for v in design.variables if v in design.response]
    rhs = [v for v in design.variables if v not in response_cols or _in_rhs(design, v)]
    return rhs[0] if len(rhs) == 1 else None


def _in_rhs(design: Design, var: str) -> bool:
    """Whether a column appears in a right-hand-side term (as a whole name: "t" is not in "Intercept")."""
    word = re.compile(rf"(?<![A-Za-z0-9_.]){re.escape(var)}(?![A-Za-z0-9_])")
    return any(word.search(t) for t in design.terms if t != "Intercept")


def straight_line(design: Design) -> str | None:
    """The predictor of a plain ``y ~ x`` model (intercept and one untransformed column)."""
    x = single_predictor(design)
    if (
        x is not None
        and design.has_intercept
        and len(design.terms) == 2
        and plain_column(design.terms[1], design.variables) == x
    ):
        return x
    return None


def judged_claims(fit: OlsFit, spec: DatasetSpec, messages: list[Message]) -> list[ClaimTest]:
    """The sidecar's declared claims tested on ``fit``; an unreadable claim, and every claim the data
    contradict, adds a warning to ``messages`` (whether the file was read whole or in chunks)."""
    claims: list[ClaimTest] = []
    for found in check_claims(fit, list(spec.claims)) if spec.claims else []:
        if isinstance(found, DatasetError):
            messages.append(Message("warning", str(found)))
        else:
            claims.append(found)
            if found.rejected:
                messages.append(Message("warning", f"Declared claim '{found.claim}': {found.conclusion}"))
    return claims


def input_messages(
    *,
    sidecar: str,
    assumed: str | None,
    notes: Sequence[str],
    rows_read: int,
    missing: Sequence[int],
    excluded: Sequence[tuple[int, str]],
    dropped: Sequence[tuple[int, str]],
    dropped_total: int,
) -> list[Message]:
    """The messages about the input that every fit states alike, whether the file was read whole or in chunks:
    an assumed model, the reader's notes, leave_out rows that are not there and those left out, rows dropped."""
    out: list[Message] = []
    if assumed is not None:
        out.append(
            Message(
                "note",
                f"There is no sidecar model, so the line {assumed} (second column against the first) was assumed.",
            )
        )
    out += [Message("warning" if "not UTF-8" in n else "note", n) for n in notes]
    if missing:
        out.append(
            Message(
                "warning",
                f"{sidecar}: leave_out names row(s) {', '.join(map(str, missing))}, which the CSV does not have "
                f"(it has data rows 1 to {rows_read}); nothing was left out for them",
            )
        )
    if excluded:
        out.append(
            Message(
                "note",
                f"{len(excluded)} row(s) left out as the sidecar asks, each with its reason (listed on the page): "
                f"rows {', '.join(str(r) for r, _ in excluded)}.",
            )
        )
    if dropped_total:
        rows = ", ".join(str(r) for r, _ in dropped[:20])
        more = f" and {dropped_total - 20} more" if dropped_total > 20 else ""
        reasons = sorted({why for _, why in dropped})
        out.append(Message("warning", f"{dropped_total} row(s) left out ({'; '.join(reasons)}): rows {rows}{more}."))
    return out


def one_normality_check(diagnostics: tuple[Diagnostic, ...]) -> tuple[Diagnostic, ...]:
    """Shapiro–Wilk and Jarque–Bera shown as one check, ``normality``, so that they never read as two verdicts.

    Shapiro–Wilk decides where it is computed (3 to 5,000 rows): it is the more powerful test in small and
    moderate samples, where Jarque–Bera's χ² approximation is poor (common practice). Above that, Jarque–Bera,
    a large-sample test, decides. The other test's result is stated in the text, not as a verdict.
    """
    by_name = {d.check: d for d in diagnostics}
    sw, jb = by_name.get("normality_shapiro"), by_name.get("normality_jarque_bera")
    if sw is None or jb is None:
        return diagnostics
    if sw.p_value is not None:
        lead, other, why = sw, jb, "Shapiro–Wilk decides (the more powerful test up to 5,000 rows)"
    else:
        lead, other, why = jb, sw, "Jarque–Bera decides (Shapiro–Wilk is computed for 3 to 5,000 rows only)"
    aside = ""
    if other.p_value is not None:
        start = other.text.rfind(" (")  # the figures are in the sentence's last parentheses
        inner = other.text[start + 2 : other.text.rfind(")")] if start >= 0 else ""
        aside = f" For reference only, not a second verdict: {inner}." if inner else ""
    merged = Diagnostic(
        "normality",
        "Bell-shaped residuals",
        lead.statistic,
        lead.p_value,
        lead.flag,
        f"{lead.text} {why}.{aside}",
        lead.advice,
        lead.rows,
    )
    out: list[Diagnostic] = []
    for d in diagnostics:
        if d.check == "normality_shapiro":
            out.append(merged)
        elif d.check != "normality_jarque_bera":
            out.append(d)
    return tuple(out)


def replicated_settings(design: Design) -> NDArray[np.bool_]:
    """Rows whose predictor setting (every design column but the intercept) occurs in more than one row."""
    cols = [j for j, t in enumerate(design.terms) if t != "Intercept"]
    if not cols:
        return np.zeros(len(design.y), dtype=bool)
    settings = np.asarray(design.X[:, cols], dtype=np.float64)
    # One predictor: the values themselves (numpy sorts rows of several columns as records, which took 6 s of a
    # 5 M-row build; one column sorted as numbers groups the same rows).
    flat = settings[:, 0] if settings.shape[1] == 1 else settings
    _, inverse, counts = np.unique(flat, axis=None if flat.ndim == 1 else 0, return_inverse=True, return_counts=True)
    return np.asarray(counts[np.ravel(inverse)] > 1, dtype=bool)


def designed_rows(design: Design, spec: DatasetSpec) -> NDArray[np.bool_]:
    """Rows whose x are set values of the design: every row of a calibration (its standards, replicated or
    not), and elsewhere the settings measured more than once. Their leverage alone never flags them."""
    if spec.purpose == "calibration":
        return np.ones(len(design.y), dtype=bool)
    return replicated_settings(design)


def fit_checks(design: Design, fit: OlsFit, infl: Influence, weights: FloatArray | None = None) -> tuple[Check, ...]:
    """Every model check of a fit read whole, on the fit's own extended-precision pieces (the one place that
    hands them to :func:`~sitegen.stats.checks.model_checks`)."""
    return model_checks(
        design.X,
        design.y,
        fit.resid,
        fit.fitted,
        terms=fit.terms,
        has_intercept=fit.has_intercept,
        infl=infl,
        alpha=1 - fit.level,
        weights=weights,
        precise=Precise(
            design.X_ext, fit.resid_ext, fit.y_ext - fit.resid_ext, fit.q, fit.xtx_inv, fit.condition, fit.q_ext
        ),
    )


def compute(
    design: Design, fit: OlsFit, spec: DatasetSpec, weights: FloatArray | None, *, weighting: str | None = None
) -> Derived:
    """Derive every requested result; problems with optional extras become warnings."""
    messages: list[Message] = []
    infl = influence(fit.q, fit.resid, fit.df_resid, weights=weights)
    flags = flag_points(infl, fit.n, len(fit.terms), designed=designed_rows(design, spec))
    checks = fit_checks(design, fit, infl, weights)
    diagnostics = tuple(
        Diagnostic(
            c.check,
            c.label,
            c.statistic,
            c.p_value,
            c.flag,
            c.text,
            c.advice,
            tuple(int(design.rows[i]) for i in c.rows),
        )
        for c in checks
    )
    diagnostics = one_normality_check(diagnostics)
    for d in diagnostics:
        if d.flag:
            messages.append(check_warning(d))
    if weights is not None:
        messages.append(Message("note", reading_weight_note(spec)))
    robust_se = None
    if spec.robust:
        sw = np.ones(fit.n) if weights is None else np.sqrt(weights)
        Xw = design.X * sw[:, None]
        cov = hc3_cov(Xw, fit.resid * sw, np.asarray(infl.leverage), fit.xtx_inv, xtx_root=fit.xtx_root, q=fit.q)
        robust_se = np.sqrt(np.clip(np.diag(cov), 0, None))
    claims = judged_claims(fit, spec, messages)
    line_x = straight_line(design)
    weighted = weights is not None
    lines, lines_text = _lines(design, fit, spec, line_x, messages, weighted=weighted)
    calibration_, limits = _calibration(design, fit, spec, line_x, messages, weights=weights, weighting=weighting)
    predictions = _predictions(design, fit, spec, messages, weights)
    groups = _groups(design, fit, spec, line_x, messages, weights=weights)
    group_flagged: tuple[FlaggedPoint, ...] = ()
    group_flagged_total = 0
    if groups is not None and groups.p_value is not None and groups.p_value < 1 - fit.level:
        group_flagged, group_flagged_total = _group_flagged(design, spec, fit.level, weights)
    chart = _chart(design, fit, infl, flags, spec, weights)
    compared = comparison(design, spec, line_x, lines, level=fit.level, messages=messages, weighted=weighted)
    calibrated = CalibrationResults()
    if line_x is not None:
        beta = (float(fit.beta[0]), float(fit.beta[1]))
        calibrated = calibration(design, beta, fit.fitted, spec, line_x=line_x, weights=weights, messages=messages)
    observations = _observations(
        design,
        fit,
        infl,
        flags,
        weights,
        reading_weight=spec.reading_weight,
        residual_percent=calibrated.residual_percent,
    )
    return Derived(
        messages=messages,
        diagnostics=diagnostics,
        flagged=_flagged(design, infl, flags),
        flagged_total=len(flags.rows),
        cutoffs=(
            ("leverage", flags.leverage_cutoff),
            ("studentized_residual", flags.residual_cutoff),
            ("cooks_distance", flags.cooks_cutoff),
            ("dffits", flags.dffits_cutoff),
        ),
        robust_se=robust_se,
        claims=tuple(claims),
        lines=lines,
        lines_text=lines_text,
        calibration=calibration_,
        limits=limits,
        predictions=predictions,
        groups=groups,
        chart=chart,
        observations=observations,
        comparison=compared,
        calibration_parts=calibrated,
        group_flagged=group_flagged,
        group_flagged_total=group_flagged_total,
    )


def reading_weight_note(spec: DatasetSpec) -> str:
    """The sentence that says which weight a new reading has in the prediction intervals."""
    w = spec.reading_weight
    return (
        f"Prediction intervals (the chart's band, the predictions and observations.csv) are for one new "
        f"reading of weight {w:g}, whose variance is σ²/{w:g}; set 'reading_weight' in the sidecar "
        "to the weight a new reading will have."
    )


def _new_weights(spec: DatasetSpec, weights: FloatArray | None, k: int) -> FloatArray | None:
    """Weights of k new readings: the sidecar's reading_weight for a weighted fit, else none."""
    return None if weights is None else np.full(k, float(spec.reading_weight))


#: The reasons a row is flagged, in the order they are listed; the first two exclude each other.
_REASONS = (
    "alone sets a coefficient (leverage 1)",
    "leverage above 2p/n",
    "|studentized residual| above 3",
    "Cook's distance above 4/n",
    "|DFFITS| above 2√(p/n)",
)


def _reason_codes(flags: PointFlags) -> NDArray[np.intp]:
    """Each row's reasons as a bit mask (bit k: ``_REASONS[k]``), for every row at once."""
    high_only = np.asarray(flags.high_leverage) & ~np.asarray(flags.leverage_one)
    marks = (flags.leverage_one, high_only, flags.large_residual, flags.large_cooks, flags.large_dffits)
    code = np.zeros(len(flags.leverage_one), dtype=np.intp)
    for bit, mark in enumerate(marks):
        code |= np.asarray(mark, dtype=np.intp) << bit
    if flags.marked is not None:  # a designed row that crossed a cut-off by its leverage alone: no reason
        code[~np.asarray(flags.marked, dtype=bool)] = 0
    return code


def _reasons_of(code: int) -> tuple[str, ...]:
    return tuple(text for bit, text in enumerate(_REASONS) if code >> bit & 1)


def _reasons(flags: PointFlags, i: int) -> tuple[str, ...]:
    out = []
    if flags.leverage_one[i]:
        out.append(_REASONS[0])
    elif flags.high_leverage[i]:
        out.append(_REASONS[1])
    for mark, text in zip((flags.large_residual, flags.large_cooks, flags.large_dffits), _REASONS[2:], strict=True):
        if mark[i]:
            out.append(text)
    return tuple(out)


MAX_FLAGGED_LISTED = 500  # the report lists the most influential flagged rows; observations.csv has all


def _flagged(design: Design, infl: Influence, flags: PointFlags) -> tuple[FlaggedPoint, ...]:
    rows = list(flags.rows)
    if len(rows) > MAX_FLAGGED_LISTED:
        cooks = np.nan_to_num(np.asarray(infl.cooks_distance)[rows], nan=np.inf)
        keep = np.argsort(-cooks, kind="stable")[:MAX_FLAGGED_LISTED]
        rows = sorted(rows[int(k)] for k in keep)
    return tuple(
        FlaggedPoint(
            int(design.rows[i]),
            _reasons(flags, i),
            float(infl.leverage[i]),
            float(infl.studentized_residual[i]),
            float(infl.cooks_distance[i]),
            float(infl.dffits[i]),
        )
        for i in rows
    )


def _lines(
    design: Design, fit: OlsFit, spec: DatasetSpec, x_col: str | None, messages: list[Message], *, weighted: bool
) -> tuple[tuple[AltLine, ...], str]:
    if not spec.lines:
        return (), ""
    if x_col is None:
        messages.append(
            Message(
                "warning",
                "alternative lines need a straight-line model such as \"y ~ x\"; the 'lines' request was skipped",
            )
        )
        return (), ""
    if weighted:
        messages.append(
            Message(
                "warning",
                "the alternative lines do not take weights, so they are not drawn for this weighted fit; "
                "remove 'weights' (or 'weighting') or 'lines' from the sidecar",
            )
        )
        return (), ""
    x = design.X[:, 1]
    closed_form = tuple(m for m in spec.lines if m != "passing_bablok")
    try:
        found = alternative_lines(x, design.y, ("ols", *closed_form), error_ratio=spec.error_ratio, level=fit.level)
    except (FitError, ValueError, ArithmeticError) as exc:  # e.g. overflow for responses near 1e308
        messages.append(Message("warning", f"alternative lines could not be computed: {exc}"))
        return (), ""
    robust: tuple[AltLine, ...] = ()
    if "passing_bablok" in spec.lines:
        try:
            pb = passing_bablok_line(np.asarray(x, dtype=np.float64), np.asarray(design.y, dtype=np.float64), fit.level)
            robust = (pb,)
            if pb.note:
                messages.append(Message("warning", f"Passing–Bablok line: {pb.note}."))
            if not pb.linear:
                messages.append(
                    Message(
                        "warning",
                        "Passing–Bablok line: its cusum test finds the relation between the methods not linear "
                        f"(largest cusum {pb.cusum_max:.3g} above {pb.cusum_critical:.3g}); the line and its bias "
                        "figures do not describe the whole range.",
                    )
                )
        except (FitError, ValueError, ArithmeticError) as exc:
            messages.append(Message("warning", f"the Passing–Bablok line could not be computed: {exc}"))
    out = tuple(
        AltLine(
            ln.method,
            ln.label,
            ln.slope,
            ln.intercept,
            ln.slope_ci_low,
            ln.slope_ci_high,
            ln.intercept_ci_low,
            ln.intercept_ci_high,
            ln.interval_method,
        )
        for ln in found
        if ln.method != "ols"  # the least-squares line is the fit itself; the page shows it beside these
    )
    text = explain_lines(found, float(np.corrcoef(x, design.y)[0, 1])) if closed_form else ""
    if robust:
        text = (text + " " if text else "") + (
            "The Passing–Bablok line is the shifted median of the slopes between every pair of points, so a "
            "few outlying results barely move it."
        )
    return out + robust, text


def _calibration(
    design: Design,
    fit: OlsFit,
    spec: DatasetSpec,
    x_col: str | None,
    messages: list[Message],
    *,
    weights: FloatArray | None = None,
    weighting: str | None = None,
) -> tuple[tuple[Calibration, ...], DetectionLimits | None]:
    if not spec.calibrate:
        return (), None
    if x_col is None or not plain_response(design):
        messages.append(
            Message(
                "warning",
                "inverse prediction needs a straight-line model of an untransformed response, "
                "such as \"y ~ x\"; the 'calibrate' request was skipped",
            )
        )
        return (), None
    x = design.X[:, 1]
    a, b = float(fit.beta[0]), float(fit.beta[1])
    try:
        if weights is not None:
            found, lim = _weighted_inverse(design, fit, spec, weights, weighting, messages)
        else:
            found = inverse_predict(
                intercept=a,
                slope=b,
                residual_sd=fit.sigma,
                n=fit.n,
                x_mean=float(x.mean()),
                sxx=float(((x - x.mean()) ** 2).sum()),
                y_mean=a + b * float(x.mean()),
                df_resid=fit.df_resid,
                level=fit.level,
                responses=spec.calibrate,
                readings=spec.readings,
            )
            lim = detection_limits(slope=b, residual_sd=fit.sigma, intercept_se=float(fit.std_error[0]))
    except OverflowError:  # responses near 1e308: the interval's arithmetic leaves double precision
        messages.append(
            Message(
                "warning",
                "inverse prediction could not be computed: a response is too large for floating-point arithmetic "
                "(about 1.8e308 at most, less once squared); the 'calibrate' request was skipped",
            )
        )
        return (), None
    except (FitError, ValueError, ArithmeticError) as exc:
        messages.append(Message("warning", f"inverse prediction could not be computed: {exc}"))
        return (), None
    lo, hi = float(x.min()), float(x.max())
    method = "fieller" if weights is None else f"fieller, weighted {weighting or f'by column {spec.weights}'}"
    cal = tuple(
        Calibration(
            c.response,
            c.readings,
            c.estimate,
            c.std_error,
            c.ci_low,
            c.ci_high,
            method,
            c.bounded,
            extrapolated=math.isfinite(c.estimate) and not lo <= c.estimate <= hi,
        )
        for c in found
    )
    beyond = [c for c in cal if c.extrapolated]
    if beyond:
        listed = ", ".join(f"{c.response:g} → {c.estimate:.4g}" for c in beyond[:5])
        messages.append(
            Message(
                "warning",
                f"extrapolation: {len(beyond)} inverse prediction(s) lie outside the range of {x_col} in the data "
                f"({lo:g} to {hi:g}): {listed}; the line is not known to hold there",
            )
        )
    if any(not c.bounded for c in cal):
        messages.append(
            Message(
                "warning",
                "the slope is too uncertain to bound some inverse predictions (Fieller's interval is unbounded)",
            )
        )
    return cal, DetectionLimits(lim.lod, lim.loq, lim.convention, lim.basis)


#: The variance of a new reading under each weighting, as a quadratic in the x it is read at (units of σ²).
_WEIGHTING_VARIANCE = {"1/x": (0.0, 1.0, 0.0), "1/x²": (0.0, 0.0, 1.0)}


def _weighted_inverse(  # noqa: PLR0917 - the fit and what it was fitted with
    design: Design,
    fit: OlsFit,
    spec: DatasetSpec,
    weights: FloatArray,
    weighting: str | None,
    messages: list[Message],
) -> tuple[tuple[InversePrediction, ...], DetectionLimitsFound]:
    """Fieller's interval through a weighted line, and its detection limits (see stats/calibration.py).

    A new reading's weight: under a weighting 1/x or 1/x² that of the x it is read at (inside the interval's
    quadratic, not a plug-in), under 1/y² that of its own response (1/ȳ₀²); with a weights column, the
    sidecar's ``reading_weight``.
    """
    x = np.asarray(design.X[:, 1], dtype=np.float64)
    a, b = float(fit.beta[0]), float(fit.beta[1])
    s2 = fit.sigma**2
    cov = s2 * np.asarray(fit.xtx_inv, dtype=np.float64)
    if weighting in _WEIGHTING_VARIANCE:
        c0, c1, c2 = _WEIGHTING_VARIANCE[weighting]
        variances = [ReadingVariance(c0, c1, c2)] * len(spec.calibrate)
        how = f"a reading's weight is the weighting {weighting} at the x it is read at"
    elif weighting == "1/y²":
        variances = [ReadingVariance(y0 * y0) for y0 in spec.calibrate]
        how = "a reading's weight is 1/ȳ₀², from its own response (the weighting 1/y²)"
    else:
        variances = [ReadingVariance(1.0 / spec.reading_weight)] * len(spec.calibrate)
        how = f"a reading's weight is reading_weight = {spec.reading_weight:g} (set it in the sidecar)"
    found = inverse_predict_wls(
        intercept=a,
        slope=b,
        cov=((float(cov[0, 0]), float(cov[0, 1])), (float(cov[1, 0]), float(cov[1, 1]))),
        residual_var=s2,
        df_resid=fit.df_resid,
        level=fit.level,
        responses=spec.calibrate,
        variances=variances,
        readings=spec.readings,
    )
    low_x = float(x.min())
    low_weight = float(np.mean(weights[x == low_x]))
    lim = weighted_detection_limits(slope=b, residual_sd=fit.sigma, low_weight=low_weight, low_x=low_x)
    messages.append(
        Message(
            "note",
            f"Samples are read back through the weighted line with Fieller's interval ({how}); the detection "
            "and quantitation limits use the scatter of one reading at the lowest standard.",
        )
    )
    return found, lim


def _column(values: list[Any]) -> NDArray[Any]:
    """Prediction values of one column: numbers (missing as NaN), else text."""
    if all(v is None or (isinstance(v, int | float) and not isinstance(v, bool)) for v in values):
        return np.array([np.nan if v is None else float(v) for v in values], dtype=float)
    return np.array(values, dtype=object)


def _predictions(
    design: Design, fit: OlsFit, spec: DatasetSpec, messages: list[Message], weights: FloatArray | None
) -> tuple[Prediction, ...]:
    if not spec.predict_at:
        return ()
    first = spec.predict_at[0]
    if isinstance(first, tuple):
        rows = [dict(r) for r in spec.predict_at if isinstance(r, tuple)]
    else:
        x_col = single_predictor(design)
        if x_col is None:
            messages.append(
                Message(
                    "warning",
                    "predict_at with plain numbers needs a one-predictor model; "
                    "give tables such as { flow = 10, head = 30 } instead",
                )
            )
            return ()
        rows = [{x_col: float(v)} for v in spec.predict_at if not isinstance(v, tuple)]
    names = list(dict.fromkeys(k for row in rows for k in row))
    for i, row in enumerate(rows, start=1):
        missing = [k for k in names if k not in row]
        if missing:
            messages.append(
                Message(
                    "warning", f"predict_at: entry {i} has no value for {missing[0]!r}; give every entry the same keys"
                )
            )
            return ()
    frame = {k: _column([row[k] for row in rows]) for k in names}
    try:
        X_new = design_for(design, frame)
    except DatasetError as exc:
        messages.append(Message("warning", f"predict_at: {exc}"))
        return ()
    finite_rows: NDArray[np.bool_] = np.asarray(np.isfinite(X_new).all(axis=1))
    defined = [bool(v) for v in finite_rows]
    for row in (r for r, ok in zip(rows, defined, strict=True) if not ok):
        at = ", ".join(f"{k} = {v:g}" for k, v in row.items())
        messages.append(
            Message("warning", f"predict_at {at} is outside the model's reach (e.g. the log of a value ≤ 0); left out")
        )
    rows = [r for r, ok in zip(rows, defined, strict=True) if ok]
    X_new = X_new[defined]
    if not rows:
        return ()
    b = bands(fit, X_new, _new_weights(spec, weights, len(X_new)))
    finite = np.isfinite(b.fit) & np.isfinite(b.pred_low) & np.isfinite(b.pred_high)
    for row in (r for r, ok in zip(rows, finite, strict=True) if not ok):
        at = ", ".join(f"{k} = {v:g}" for k, v in row.items())
        messages.append(
            Message(
                "warning", f"predict_at {at}: the prediction is beyond the range of floating-point numbers; left out"
            )
        )
    keep = [i for i, ok in enumerate(finite) if ok]
    rows = [rows[i] for i in keep]
    b = bands(fit, X_new[keep], _new_weights(spec, weights, len(keep)))
    if not rows:
        return ()
    ranges = _ranges(design, names)
    outside = [_outside(row, ranges) for row in rows]
    beyond = [text for found in outside for text in found]
    if beyond:
        messages.append(
            Message(
                "warning",
                f"extrapolation: {len(beyond)} predict_at value(s) lie outside the range of the data: "
                f"{'; '.join(beyond[:5])}; the line is not known to hold there",
            )
        )
    return tuple(
        Prediction(
            tuple(sorted((k, float(v)) for k, v in row.items())),
            float(b.fit[i]),
            float(b.se_mean[i]),
            float(b.mean_low[i]),
            float(b.mean_high[i]),
            float(b.pred_low[i]),
            float(b.pred_high[i]),
            extrapolated=bool(outside[i]),
        )
        for i, row in enumerate(rows)
    )


def _ranges(design: Design, names: list[str]) -> dict[str, tuple[float, float]]:
    """(lowest, highest) of each numeric column named, over the rows fitted."""
    out: dict[str, tuple[float, float]] = {}
    for name in names:
        if name in design.data:
            values = to_float(design.data[name])[0]
            values = values[np.isfinite(values)]
            if values.size:
                out[name] = (float(values.min()), float(values.max()))
    return out


def _outside(row: dict[str, Any], ranges: dict[str, tuple[float, float]]) -> list[str]:
    """The values of one predict_at entry outside the data's range, described."""
    found = []
    for name, value in row.items():
        if name in ranges and isinstance(value, int | float) and not isinstance(value, bool):
            lo, hi = ranges[name]
            if not lo <= float(value) <= hi:
                found.append(f"{name} = {float(value):g} (data {lo:g} to {hi:g})")
    return found


def _groups(
    design: Design,
    fit: OlsFit,
    spec: DatasetSpec,
    x_col: str | None,
    messages: list[Message],
    *,
    weights: FloatArray | None,
) -> GroupComparison | None:
    if not spec.group:
        return None
    if x_col is None:
        messages.append(
            Message(
                "warning",
                "one line per group needs a straight-line model such as \"y ~ x\"; the 'group' request was skipped",
            )
        )
        return None
    labels = np.array([str(v) for v in design.data[spec.group].tolist()], dtype=str)
    try:
        return compare_groups(design.X[:, 1], design.y, labels, spec.group, fit.level, weights=weights)
    except DatasetError as exc:
        messages.append(Message("warning", f"group comparison skipped: {exc}"))
        return None


def _group_flagged(
    design: Design, spec: DatasetSpec, level: float, weights: FloatArray | None
) -> tuple[tuple[FlaggedPoint, ...], int]:
    """Rows flagged against each group's own line: the separate-lines model (a level and a slope per group,
    fitted together so that the groups share one residual variance), by the same rules as the pooled line."""
    assert spec.group is not None
    labels = np.array([str(v) for v in design.data[spec.group].tolist()], dtype=str)
    names = sorted(set(labels.tolist()))
    x = np.asarray(design.X[:, 1], dtype=np.float64)
    dummies = np.column_stack([(labels == g).astype(float) for g in names])
    full = np.column_stack([dummies, dummies * x[:, None]])
    terms = tuple(f"{kind} {g}" for kind in ("level", "slope") for g in names)
    try:
        sep = fit_ols(full.astype(LD), np.asarray(design.y).astype(LD), terms, has_intercept=True, level=level,
                      weights=weights)  # fmt: skip
    except DatasetError:
        return (), 0
    infl = influence(sep.q, sep.resid, sep.df_resid, weights=weights)
    flags = flag_points(infl, sep.n, len(terms), designed=designed_rows(design, spec))
    return _flagged(design, infl, flags), len(flags.rows)


#: Width of the bins of the residual-shape chart, in standardized-residual units.
SPREAD_BIN = 0.5
#: The bins reach at least this far either side of zero, and at most SPREAD_REACH_MAX.
SPREAD_REACH = 3.0
SPREAD_REACH_MAX = 6.0


def _normal_cdf(z: float) -> float:
    return 0.5 * math.erfc(-z / math.sqrt(2.0))


def spread_bins(std: FloatArray) -> tuple[tuple[float, float, float, float], ...]:
    """Counts of standardized residuals in bins of SPREAD_BIN, with the counts a bell shape would give.

    Every finite value is counted (the chart is not drawn from a sample); values beyond the outer
    bins are counted in them, and the outer bins' expected counts take the whole tail, so both
    columns sum to the number of rows. Rows: (low edge, high edge, count, expected count).
    """
    vals = np.asarray(std, dtype=float)
    vals = vals[np.isfinite(vals)]
    if vals.size == 0:
        return ()
    edges = spread_edges(float(np.max(np.abs(vals))))
    top = float(edges[-1])
    counts, _ = np.histogram(np.clip(vals, -top, top), bins=edges)
    return spread_rows(edges, counts, vals.size)


def spread_edges(largest: float) -> FloatArray:
    """The residual-shape chart's bin edges for standardized residuals up to ``largest`` in size: SPREAD_BIN
    wide, reaching at least SPREAD_REACH and at most SPREAD_REACH_MAX either side of zero."""
    top = min(max(SPREAD_REACH, math.ceil(largest / SPREAD_BIN) * SPREAD_BIN), SPREAD_REACH_MAX)
    return np.arange(-top, top + SPREAD_BIN / 2, SPREAD_BIN)


def spread_rows(edges: FloatArray, counts: FloatArray, m: int) -> tuple[tuple[float, float, float, float], ...]:
    """The rows of :func:`spread_bins` from the bins' counts of ``m`` values (for a file read whole or in
    chunks): each bin's expected count under a bell shape, the outer bins taking the whole tail."""
    out = []
    last = len(edges) - 2
    for i in range(len(edges) - 1):
        lo = -math.inf if i == 0 else float(edges[i])
        hi = math.inf if i == last else float(edges[i + 1])
        expected = m * (_normal_cdf(hi) - _normal_cdf(lo))
        out.append((float(edges[i]), float(edges[i + 1]), float(counts[i]), expected))
    return tuple(out)


def _chart_sample(
    n: int, flagged_rows: tuple[int, ...], severity: FloatArray | None = None
) -> tuple[NDArray[np.intp], bool]:
    """Every row, or above MAX_CHART_POINTS a fixed random sample plus the flagged rows.

    When more rows are flagged than there is room for, the most severe are kept (largest
    ``severity``, e.g. Cook's distance), not the first in file order.
    """
    if n <= MAX_CHART_POINTS:
        return np.arange(n), False
    rng = np.random.default_rng(20240611)
    pick = rng.choice(n, size=SAMPLE_POINTS, replace=False)
    room = MAX_CHART_POINTS - SAMPLE_POINTS
    flagged = np.asarray(flagged_rows, dtype=np.intp)
    if flagged.size > room and severity is not None:
        score = np.nan_to_num(np.asarray(severity, dtype=float)[flagged], nan=-np.inf)
        flagged = flagged[np.argsort(-score, kind="stable")[:room]]
    return np.unique(np.concatenate([pick, flagged[:room]])), True


def _clean(values: FloatArray) -> tuple[float | None, ...]:
    arr = np.asarray(values, dtype=float)
    if bool(np.isfinite(arr).all()):
        return tuple(arr.tolist())
    return tuple(v if math.isfinite(v) else None for v in arr.tolist())


def _chart(  # noqa: PLR0917 - the fit and what was derived from it
    design: Design, fit: OlsFit, infl: Influence, flags: PointFlags, spec: DatasetSpec, weights: FloatArray | None
) -> ChartData:
    x_col = single_predictor(design)
    idx, sampled = _chart_sample(fit.n, flags.rows, np.asarray(infl.cooks_distance))
    std = np.asarray(infl.standardized_residual)
    is_flag = np.zeros(fit.n)
    is_flag[list(flags.rows)] = 1.0
    # Only the drawn rows (idx) are computed.
    cols: dict[str, FloatArray] = {
        "row": design.rows[idx].astype(float),
        "y": design.y[idx],
        "fitted": fit.fitted[idx],
        "residual": fit.resid[idx],
        "studentized": np.asarray(infl.studentized_residual)[idx],
        "leverage": np.asarray(infl.leverage)[idx],
        "cooks": np.asarray(infl.cooks_distance)[idx],
        "std_resid": std[idx],
        "flag": is_flag[idx],
    }
    x_all = design.data[x_col].astype(float) if x_col is not None else None
    if x_all is not None:
        cols["x"] = x_all[idx]
    names = tuple(sorted(cols))
    points = tuple(zip(*(_clean(cols[c]) for c in names), strict=True))
    groups: tuple[str, ...] = ()
    if spec.group and x_col is not None:
        groups = tuple(str(v) for v in design.data[spec.group][idx].tolist())
    band: ChartTable = ((), ())
    if x_col is not None and x_all is not None:
        reading_weight = None if weights is None else float(spec.reading_weight)
        band = band_table(design, x_col, (float(x_all.min()), float(x_all.max())), fit, reading_weight)
    density: ChartTable = ((), ())
    if sampled and x_all is not None:
        counts, xe, ye = np.histogram2d(x_all, design.y, bins=DENSITY_BINS)
        density = density_table(counts, xe, ye)
    return chart_data(x_col, design.response, (names, points), band, density, spread_bins(std), fit.n, groups)


#: A chart table: its column names and its rows.
ChartTable = tuple[tuple[str, ...], tuple[tuple[float | None, ...], ...]]


def band_table(
    design: Design, x_col: str, span: tuple[float, float], fit: OlsFit, reading_weight: float | None
) -> ChartTable:
    """The chart's fitted line and its intervals on a grid of BAND_STEPS values of ``x_col`` across ``span``
    (empty when the model cannot be evaluated there); ``reading_weight``: the weight of a new reading in a
    weighted fit (None: unweighted). For a file read whole or in chunks."""
    grid = np.linspace(span[0], span[1], BAND_STEPS)
    try:
        Xg = design_for(design, {x_col: grid})
    except DatasetError:
        return (), ()
    if Xg.shape[1] != len(fit.terms):
        return (), ()
    b = bands(fit, Xg, None if reading_weight is None else np.full(len(Xg), reading_weight))
    columns = ("x", "fit", "mean_low", "mean_high", "pred_low", "pred_high")
    rows = zip(*(_clean(v) for v in (grid, b.fit, b.mean_low, b.mean_high, b.pred_low, b.pred_high)), strict=True)
    return columns, tuple(rows)


def density_table(counts: FloatArray, xe: FloatArray, ye: FloatArray) -> ChartTable:
    """The chart's density of points: the cells of the grid ``xe`` × ``ye`` that hold any, with their counts."""
    ii, jj = np.nonzero(counts)
    rows = tuple(
        (float(xe[i]), float(xe[i + 1]), float(ye[j]), float(ye[j + 1]), float(counts[i, j]))
        for i, j in zip(ii, jj, strict=True)
    )
    return ("x0", "x1", "y0", "y1", "count"), rows


def chart_data(  # noqa: PLR0917 - the chart's tables
    x_col: str | None,
    y_name: str,
    points: ChartTable,
    band: ChartTable,
    density: ChartTable,
    spread: tuple[tuple[float, float, float, float], ...],
    n_total: int,
    groups: tuple[str, ...] = (),
) -> ChartData:
    """The chart's numbers from its tables (for a file read whole or in chunks); the points are a sample when
    there are more than MAX_CHART_POINTS rows."""
    return ChartData(
        x=x_col,
        y=y_name,
        point_columns=points[0],
        points=points[1],
        band_columns=band[0],
        band=band[1],
        sampled=n_total > MAX_CHART_POINTS,
        n_total=n_total,
        density_columns=density[0],
        density=density[1],
        point_groups=groups,
        spread_columns=("low", "high", "count", "expected"),
        spread=spread,
    )


def _observations(
    design: Design,
    fit: OlsFit,
    infl: Influence,
    flags: PointFlags,
    weights: FloatArray | None,
    *,
    reading_weight: float = 1.0,
    residual_percent: FloatArray | None = None,
) -> Observations:
    b = row_bands(fit, weights, reading_weight)
    cols: dict[str, NDArray[np.generic]] = {"row": design.rows}
    for v in design.variables:
        cols[v] = design.data[v].astype(float, copy=False)  # written out, never changed
    if design.response not in cols:
        cols[design.response] = design.y
    if weights is not None:
        cols["weight"] = weights
    texts = np.array(["; ".join(_reasons_of(code)) for code in range(1 << len(_REASONS))], dtype=object)
    flag_text = texts[_reason_codes(flags)]
    cols |= {
        "fitted": fit.fitted,
        "residual": fit.resid,
        "mean_ci_low": b.mean_low,
        "mean_ci_high": b.mean_high,
        "pred_low": b.pred_low,
        "pred_high": b.pred_high,
        "leverage": np.asarray(infl.leverage),
        "studentized_residual": np.asarray(infl.studentized_residual),
        "cooks_distance": np.asarray(infl.cooks_distance),
        "dffits": np.asarray(infl.dffits),
        "flags": flag_text,
    }
    if residual_percent is not None:  # calibrations: the residual in percent of the fitted value
        cols["residual_percent"] = residual_percent
    return Observations(tuple(cols), tuple(cols.values()))


def acceptance_evidence(
    design: Design, fit: OlsFit, spec: DatasetSpec, *, lines: tuple[AltLine, ...] = (), weighted: bool = False
) -> Evidence:
    """Standards read back and bias at the ``max_bias`` levels, for the criteria that ask for them."""
    from sitegen.stats.acceptance import BiasAt as AcceptedBias  # noqa: PLC0415
    from sitegen.stats.acceptance import bias_at, read_back  # noqa: PLC0415

    req = spec.requirements
    if req is None:
        return Evidence()
    line_x = straight_line(design)
    plain_response = plain_column(design.response, design.variables) is not None
    x_col = single_predictor(design)
    x_range = None
    if x_col is not None:
        xs = design.data[x_col].astype(float)
        x_range = (float(xs.min()), float(xs.max()))
    found = None
    found_reason = ""
    if req.back_calculated_within_percent is not None:
        if line_x is None or not plain_response:
            found_reason = 'standards are read back only through a straight line of an untransformed response ("y ~ x")'
        else:
            found = read_back(float(fit.beta[0]), float(fit.beta[1]), design.X[:, 1], design.y, design.rows)
    bias = None
    bias_reason = ""
    bias_line = ""
    if req.max_bias is not None:
        if x_col is None or not plain_response:
            bias_reason = "the bias (fitted y − x) needs a one-predictor model of an untransformed response"
        else:
            at = np.asarray(req.max_bias.at, dtype=float)
            if spec.purpose == "comparison" and line_x is not None and not weighted:
                # A comparison's bias comes from the line its page recommends, as in fit.json's "bias".
                found_bias, bias_reason = comparison_bias(
                    design, spec, line_x, lines, levels=tuple(at.tolist()), level=fit.level
                )
                if found_bias is not None:
                    bias = tuple(AcceptedBias(b.at, b.estimate, b.ci_low, b.ci_high) for b in found_bias)
                    bias_line = found_bias[0].line if found_bias else ""
            else:
                try:
                    X_at = design_for(design, {x_col: at})
                except DatasetError as exc:
                    X_at, bias_reason = None, f"the model cannot be evaluated at those levels ({exc})"
                if X_at is not None:
                    bias = bias_at(fit, X_at, at)
    return Evidence(found, found_reason, bias, bias_reason, x_range, bias_line)
