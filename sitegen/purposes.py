"""What a comparison or a calibration page leads with, wired from the sidecar to the statistics.

A dataset's ``purpose`` (``relation``, ``comparison``, ``calibration``) decides which of
these run; each statistic is a pure function in :mod:`sitegen.stats` (agreement,
passing_bablok, bias, readback). This module only picks the data columns, chooses the
line the bias is read from and words the conclusions. Problems become warnings on the
page, never the end of the fit.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.formula import Design, plain_column
from sitegen.model import (
    Agreement,
    AltLine,
    BiasAt,
    LinearityCheck,
    Message,
    ReadBackLevel,
    WeightingOption,
)
from sitegen.report.fmt import given, num
from sitegen.report.fmt import level as fmt_level
from sitegen.spec import DatasetSpec
from sitegen.stats.agreement import difference_analysis
from sitegen.stats.bias import bias_at
from sitegen.stats.passing_bablok import BOOTSTRAP_MAX_POINTS, passing_bablok
from sitegen.stats.readback import choose_weighting, mandel_test, read_back, weights_for
from sitegen.stats.text import p_text

FloatArray = NDArray[np.float64]

PB_LABEL = "Passing–Bablok (median of pairwise slopes; robust to outlying results)"
_DEMING_METHODS = ("deming", "orthogonal")


@dataclass(frozen=True, slots=True)
class ComparisonResults:
    """The method-comparison parts of a report."""

    agreement: Agreement | None = None
    agreement_percent: Agreement | None = None
    bias: tuple[BiasAt, ...] = ()
    bias_line: str = ""
    bias_reason: str = ""
    text: str = ""


@dataclass(frozen=True, slots=True)
class CalibrationResults:
    """The calibration parts of a report."""

    back_calculated: tuple[ReadBackLevel, ...] = ()
    linearity: LinearityCheck | None = None
    working_range: tuple[float, float] | None = None
    residual_percent: FloatArray | None = None


@dataclass(frozen=True, slots=True)
class Weighting:
    """The weights of the page's fit when the sidecar sets or asks to choose a weighting."""

    name: str
    weights: FloatArray | None
    options: tuple[WeightingOption, ...] = ()
    reason: str = ""


def plain_response(design: Design) -> bool:
    """Whether the response is a data column as it is (``y`` or ``Q('kit result')``, not ``np.log(y)``)."""
    return plain_column(design.response, design.variables) is not None


def paired_columns(design: Design, line_x: str | None) -> tuple[FloatArray, FloatArray] | None:
    """x (reference / nominal) and y (test / response) of a plain ``y ~ x`` model, else None."""
    if line_x is None or not plain_response(design):
        return None
    return np.asarray(design.X[:, 1], dtype=np.float64), np.asarray(design.y, dtype=np.float64)


def passing_bablok_line(x: FloatArray, y: FloatArray, level: float) -> AltLine:
    """The Passing–Bablok line as a report line (raises FitError when it cannot be formed)."""
    pb = passing_bablok(x, y, level=level)
    note = ""
    if not pb.interval_available:
        note = "too few points for the rank-based interval"
    if pb.slope <= 0.0:
        note = "the slope is not positive: the method assumes two methods measuring the same quantity"
    return AltLine(
        method="passing_bablok",
        label=PB_LABEL,
        slope=pb.slope,
        intercept=pb.intercept,
        slope_ci_low=pb.slope_ci_low,
        slope_ci_high=pb.slope_ci_high,
        intercept_ci_low=pb.intercept_ci_low,
        intercept_ci_high=pb.intercept_ci_high,
        interval_method=pb.interval_method + (f"; {note}" if note else ""),
        linear=pb.linear,
        cusum_max=pb.cusum_max,
        cusum_critical=pb.cusum_critical,
        note=note,
    )


def recommended_line(lines: tuple[AltLine, ...], error_ratio: float, n: int) -> tuple[str, str]:
    """The line the bias is read from, and why (in words)."""
    pb = next((ln for ln in lines if ln.method == "passing_bablok"), None)
    pb_usable = pb is not None and pb.slope > 0.0 and math.isfinite(pb.slope_ci_low)
    if pb is not None and pb_usable and pb.linear:
        if n <= BOOTSTRAP_MAX_POINTS:
            how = "percentile bootstrap intervals (1,000 resamples of the pairs, fixed seed)"
        else:
            how = (
                f"rank-based intervals without resampling (above {BOOTSTRAP_MAX_POINTS} pairs the bootstrap costs "
                "too much): the slope's interval of Passing and Bablok combined with the order-statistic interval "
                "of the median that places the line, each at half the error rate (Bonferroni), so they are "
                "conservative"
            )
        return "passing_bablok", (
            "Passing–Bablok, because it allows measurement error in both methods, assumes no particular "
            f"error distribution and is not pulled by single outlying results; its bias intervals are {how}."
        )
    why_not = ""
    if pb is not None:
        why = f"{pb.note or 'no interval'}." if not pb_usable else "its cusum test finds the relation not linear."
        why_not = " Passing–Bablok was not used: " + why
    dem = next((ln for ln in lines if ln.method in _DEMING_METHODS), None)
    if dem is not None:
        ratio = 1.0 if dem.method == "orthogonal" else error_ratio
        return dem.method, (
            f"Deming regression (error variance ratio {ratio:g}), because both methods carry measurement "
            f"error.{why_not}"
        )
    return "ols", (
        "Least squares of the test method on the reference, which takes the reference's error as "
        f'negligible; add lines = ["passing_bablok"] or ["deming"] when both carry error.{why_not}'
    )


def comparison(
    design: Design,
    spec: DatasetSpec,
    line_x: str | None,
    lines: tuple[AltLine, ...],
    *,
    level: float,
    messages: list[Message],
    weighted: bool = False,
) -> ComparisonResults:
    """Difference analysis and bias at the decision levels (the latter for any purpose).

    A comparison's bias is also given at the levels of a ``max_bias`` requirement, so that fit.json's
    ``bias`` holds every figure the requirement is judged on.
    """
    wants_agreement = spec.purpose == "comparison"
    levels = spec.decision_levels
    if wants_agreement and spec.requirements is not None and spec.requirements.max_bias is not None:
        levels = tuple(dict.fromkeys((*levels, *spec.requirements.max_bias.at)))
    if not wants_agreement and not levels:
        return ComparisonResults()
    if weighted and levels:
        messages.append(
            Message(
                "warning",
                "decision_levels: the bias is read from an unweighted line, so it is not given for this "
                "weighted fit; remove the weights to see it",
            )
        )
        levels = ()
    pair = paired_columns(design, line_x)
    if pair is None:
        messages.append(
            Message(
                "warning",
                "a method comparison needs a straight-line model of the untransformed test result on the "
                'reference, such as "test ~ reference"; the comparison parts were skipped',
            )
        )
        return ComparisonResults()
    x, y = pair
    agreement = agreement_percent = None
    if wants_agreement:
        try:
            agreement = difference_analysis(y, x, level=level)
            if spec.percent_differences:
                agreement_percent = difference_analysis(y, x, level=level, scale="percent")
        except (FitError, ArithmeticError) as exc:
            messages.append(Message("warning", f"the difference analysis could not be computed: {exc}"))
        if agreement is not None and agreement.trend_flag:
            messages.append(
                Message(
                    "warning",
                    "The differences change with the level (their slope on the pairs' means is "
                    f"{num(agreement.trend_slope, 3)}, {p_text(agreement.trend_p_value)}): one pair of limits of "
                    "agreement does not describe the whole range. Look at the difference chart"
                    + (
                        " in percent."
                        if spec.percent_differences
                        else "; percent_differences = true may suit differences that grow in proportion."
                    ),
                )
            )
    method, reason = recommended_line(lines, spec.error_ratio, int(x.size))
    bias: tuple[BiasAt, ...] = ()
    if levels:
        try:
            found = bias_at(x, y, levels, method=method, level=level, error_ratio=spec.error_ratio)
            bias = tuple(BiasAt(**asdict(b)) for b in found)
        except (FitError, ValueError, ArithmeticError) as exc:
            messages.append(Message("warning", f"the bias at the decision levels could not be computed: {exc}"))
    text = conclusion(agreement, bias, lines, level, unit=difference_unit(design, spec)) if wants_agreement else ""
    return ComparisonResults(agreement, agreement_percent, bias, method if bias else "", reason if bias else "", text)


def comparison_bias(
    design: Design,
    spec: DatasetSpec,
    line_x: str | None,
    lines: tuple[AltLine, ...],
    *,
    levels: tuple[float, ...],
    level: float,
) -> tuple[tuple[BiasAt, ...] | None, str]:
    """The bias at any levels from the line a comparison page recommends (for requirements), or why not."""
    pair = paired_columns(design, line_x)
    if pair is None:
        return None, "the bias needs a straight-line model of the untransformed test result on the reference"
    x, y = pair
    method, _ = recommended_line(lines, spec.error_ratio, int(x.size))
    try:
        found = bias_at(x, y, levels, method=method, level=level, error_ratio=spec.error_ratio)
    except (FitError, ValueError, ArithmeticError) as exc:
        return None, f"the bias could not be computed: {exc}"
    return tuple(BiasAt(**asdict(b)) for b in found), ""


def difference_unit(design: Design, spec: DatasetSpec) -> str:
    """The unit of the differences test − reference: the response's, else the reference's ("" if neither)."""
    units = dict(spec.units)
    y_col = plain_column(design.response, design.variables)
    if y_col is not None and units.get(y_col):
        return units[y_col]
    x_col = next((v for v in design.variables if v != y_col), None)
    return units.get(x_col, "") if x_col is not None else ""


def _fmt(v: float, unit: str = "") -> str:
    """A measured figure as the rest of the page rounds it (4 significant digits), with its unit."""
    return num(v) + (f" {unit}" if unit else "")


def _signed_percent(v: float) -> str:
    text = num(v, 3)
    return f"+{text}" if v > 0 else text


def conclusion(
    agreement: Agreement | None,
    bias: tuple[BiasAt, ...],
    lines: tuple[AltLine, ...],
    level: float,
    *,
    unit: str = "",
) -> str:
    """Plain sentences: what the comparison shows, deferring to the user's acceptance limits.

    Numbers follow the page's one rule (:mod:`sitegen.report.fmt`): measured figures to 4 significant
    digits with the unit of the differences, percentages to 3; levels the user declared as written.
    """
    pct = fmt_level(level)
    parts: list[str] = []
    pb = next((ln for ln in lines if ln.method == "passing_bablok" and math.isfinite(ln.slope_ci_low)), None)
    if pb is not None:
        slope_ok = pb.slope_ci_low <= 1.0 <= pb.slope_ci_high
        icpt_ok = pb.intercept_ci_low <= 0.0 <= pb.intercept_ci_high
        if slope_ok and icpt_ok:
            parts.append(
                f"The Passing–Bablok line's {pct} intervals include slope 1 and intercept 0: no systematic "
                "difference between the methods is shown."
            )
        else:
            kinds = []
            if not slope_ok:
                kinds.append(f"a proportional difference (slope {_fmt(pb.slope)}, interval excludes 1)")
            if not icpt_ok:
                kinds.append(f"a constant difference (intercept {_fmt(pb.intercept, unit)}, interval excludes 0)")
            parts.append("The Passing–Bablok line shows " + " and ".join(kinds) + ".")
    if agreement is not None:
        parts.append(
            f"On average the test method reads {_fmt(agreement.mean_difference, unit)} "
            f"({pct} interval {_fmt(agreement.mean_difference_ci_low)} to "
            f"{_fmt(agreement.mean_difference_ci_high, unit)}) from the reference; {pct} of single differences "
            f"are expected between {_fmt(agreement.limit_low)} and {_fmt(agreement.limit_high, unit)}."
        )
    if bias:
        clear = [b for b in bias if b.ci_low <= 0.0 <= b.ci_high]
        shown = [b for b in bias if not (b.ci_low <= 0.0 <= b.ci_high) and math.isfinite(b.ci_low)]
        at_unit = f" {unit}" if unit else ""
        if clear:
            levels = ", ".join(given(b.at) for b in clear)
            parts.append(f"At {levels}{at_unit} the bias interval includes zero.")
        for b in shown:
            share = f" ({_signed_percent(b.percent)} %)" if math.isfinite(b.percent) else ""
            parts.append(
                f"At {given(b.at)}{at_unit} the bias is {_fmt(b.estimate, unit)}{share}, {pct} interval "
                f"{_fmt(b.ci_low)} to {_fmt(b.ci_high, unit)}: it excludes zero."
            )
    parts.append(
        "Whether the methods can be used interchangeably depends on the bias and spread you can accept at "
        "these levels: compare the intervals with your own acceptance limits (a max_bias requirement states "
        "them in the sidecar)."
    )
    return " ".join(parts)


def choose_weights(design: Design, spec: DatasetSpec, line_x: str | None) -> Weighting | None:
    """The weighting a sidecar sets or asks sitegen to choose; None when it sets none."""
    if spec.weighting is None:
        return None
    if spec.weights:
        raise FitError(
            "the sidecar gives both a weights column and a weighting; keep one of them",
        )
    pair = paired_columns(design, line_x)
    if pair is None:
        raise FitError(
            'a weighting needs a straight-line model of the untransformed response, such as "response ~ nominal"'
        )
    x, y = pair
    if spec.weighting != "choose":
        return Weighting(spec.weighting, weights_for(spec.weighting, x, y))
    choice = choose_weighting(x, y)
    return Weighting(choice.chosen, weights_for(choice.chosen, x, y), choice.options, choice.reason)


def calibration(
    design: Design,
    beta: tuple[float, float],
    fitted: FloatArray,
    spec: DatasetSpec,
    *,
    line_x: str | None,
    weights: FloatArray | None,
    messages: list[Message],
) -> CalibrationResults:
    """Read-back of the standards, working range, linearity and residuals in percent."""
    if spec.purpose != "calibration":
        return CalibrationResults()
    pair = paired_columns(design, line_x)
    if pair is None:
        messages.append(
            Message(
                "warning",
                "a calibration needs a straight-line model of the untransformed response on the nominal value, "
                'such as "response ~ nominal"; the read-back and linearity parts were skipped',
            )
        )
        return CalibrationResults()
    x, y = pair
    back: tuple[ReadBackLevel, ...] = ()
    try:
        back = read_back(x, y, intercept=beta[0], slope=beta[1])
    except FitError as exc:
        messages.append(Message("warning", f"the standards could not be read back: {exc}"))
    linearity = None
    try:
        t = mandel_test(x, y, weights)
        linearity = t
        if not t.linear:
            messages.append(Message("warning", t.text))
    except FitError as exc:
        messages.append(Message("note", f"no linearity test: {exc}"))
    with np.errstate(divide="ignore", invalid="ignore"):
        pct = np.where(fitted != 0.0, 100.0 * (y - fitted) / fitted, np.nan)
    return CalibrationResults(back, linearity, (float(x.min()), float(x.max())), np.asarray(pct, dtype=np.float64))
