"""Judge a fit against the acceptance criteria its sidecar declares (``[requirements]``).

Each criterion becomes one :class:`~sitegen.model.Requirement` (``max_bias`` one per level) with the figure
judged, the declared limit, the figure's interval where it has one, and a sentence saying met or not met and
why. A criterion the data cannot answer (no intercept to compare, a model that is not a straight line of an
untransformed response, …) is *not met*, with the reason: a site must never call something met that nobody
checked. No I/O; numbers in the sentences are rounded by :mod:`sitegen.report.fmt`, the one rounding rule.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from sitegen.model import Coefficient, FitReport, Requirement
from sitegen.report.fmt import given, num, rsquared
from sitegen.report.fmt import level as fmt_level
from sitegen.spec import BiasLimit, RequirementSpec
from sitegen.stats.acceptance import BiasAt, ReadBack

#: Short labels of each criterion, as the page's table and the index show them.
LABELS = {
    "min_r_squared": "R² at least",
    "slope_within": "Slope inside window",
    "intercept_within": "Intercept inside window",
    "slope_interval_includes": "Slope interval includes",
    "intercept_interval_includes": "Intercept interval includes",
    "max_residual_sd": "Residual SD at most",
    "back_calculated_within_percent": "Standards read back within",
    "lowest_within_percent": "Lowest standard read back within",
    "max_bias": "Bias at a decision level within",
    "min_n": "Rows used at least",
}


_LINE_NAMES = {
    "ols": "least-squares",
    "passing_bablok": "Passing–Bablok",
    "deming": "Deming",
    "orthogonal": "orthogonal",
    "geometric_mean": "geometric-mean",
    "reverse": "reverse",
}


@dataclass(frozen=True, slots=True)
class Evidence:
    """What the criteria need beyond the report: standards read back and bias at the ``max_bias`` levels.

    ``None`` with a reason when the model cannot give them.
    """

    read_back: tuple[ReadBack, ...] | None = None
    read_back_reason: str = ""
    bias: tuple[BiasAt, ...] | None = None
    bias_reason: str = ""
    x_range: tuple[float, float] | None = None
    bias_line: str = ""  # the method of the line the bias was read from, when not the fitted line


def _unit(units: dict[str, str], column: str | None) -> str:
    return f" {units[column]}" if column and column in units else ""


def _not_judged(name: str, limit: float | tuple[float, float] | None, why: str, at: float | None = None) -> Requirement:
    return Requirement(
        name=name,
        met=False,
        value=None,
        limit=limit,
        text=f"Not met: it cannot be judged here, {why}.",
        label=LABELS[name],
        at=at,
        judged=False,
    )


def _window(
    name: str, c: Coefficient | None, window: tuple[float, float], *, what: str, lvl: str, unit: str, why_missing: str
) -> Requirement:
    if c is None or not math.isfinite(c.estimate):
        return _not_judged(name, window, why_missing)
    lo, hi = window
    inside = lo <= c.estimate <= hi
    est = f"{what} {num(c.estimate)}{unit}"
    win = f"the window {given(lo)} to {given(hi)}{unit}"
    if inside:
        text = f"Met: {est} lies inside {win}"
        if c.ci_low < lo or c.ci_high > hi:
            text += (
                f"; its {lvl} interval ({num(c.ci_low)} to {num(c.ci_high)}) reaches outside it, so these data "
                "cannot show that the true value is inside"
            )
        text += "."
    else:
        side = "below" if c.estimate < lo else "above"
        text = f"Not met: {est} is {side} {win} ({lvl} interval {num(c.ci_low)} to {num(c.ci_high)})."
    return Requirement(name, inside, c.estimate, window, text, LABELS[name], (c.ci_low, c.ci_high), unit=unit.strip())


def _includes(
    name: str, c: Coefficient | None, target: float, *, what: str, lvl: str, unit: str, why_missing: str
) -> Requirement:
    if c is None or not (math.isfinite(c.ci_low) and math.isfinite(c.ci_high)):
        return _not_judged(name, target, why_missing)
    met = c.ci_low <= target <= c.ci_high
    interval = f"the {lvl} interval of {what} ({num(c.ci_low)} to {num(c.ci_high)}{unit}, estimate {num(c.estimate)})"
    if met:
        text = f"Met: {interval} includes {given(target)}; the data are consistent with {what} = {given(target)}."
    else:
        text = f"Not met: {interval} excludes {given(target)}; the data contradict {what} = {given(target)}."
    return Requirement(name, met, c.estimate, target, text, LABELS[name], (c.ci_low, c.ci_high), unit=unit.strip())


def _percent(p: float) -> str:
    return f"{num(p, 3)} %"


def _read_back(spec: RequirementSpec, ev: Evidence, x_unit: str) -> list[Requirement]:
    out: list[Requirement] = []
    main = spec.back_calculated_within_percent
    if main is None:
        return out
    lowest_limit = spec.lowest_within_percent
    if ev.read_back is None:
        out.append(_not_judged("back_calculated_within_percent", main, ev.read_back_reason))
        if lowest_limit is not None:
            out.append(_not_judged("lowest_within_percent", lowest_limit, ev.read_back_reason))
        return out
    standards = [b for b in ev.read_back if math.isfinite(b.percent)]
    blanks = len(ev.read_back) - len(standards)
    if not standards:
        out.append(_not_judged("back_calculated_within_percent", main, "every standard has a nominal value of 0"))
        return out
    lowest = min(abs(b.nominal) for b in standards)
    at_lowest = [b for b in standards if abs(b.nominal) == lowest]
    rest = [b for b in standards if abs(b.nominal) != lowest] if lowest_limit is not None else standards
    blank_note = ""
    if blanks:
        many = blanks > 1
        blank_note = (
            f" {blanks} blank standard{'s' if many else ''} (nominal value 0) {'are' if many else 'is'} not judged."
        )

    def judge(name: str, group: Sequence[ReadBack], limit: float, what: str) -> Requirement:
        worst = max(group, key=lambda b: abs(b.percent))
        bad = [b for b in group if abs(b.percent) > limit]
        shown = f"{given(worst.nominal)}{x_unit} read back as {num(worst.found)}{x_unit}, {_percent(worst.percent)}"
        if bad:
            rows = ", ".join(str(b.row) for b in bad[:12]) + (" …" if len(bad) > 12 else "")
            text = (
                f"Not met: {len(bad)} of {len(group)} {what} read back more than ±{given(limit)} % from nominal "
                f"(CSV rows {rows}); the worst is {shown}."
            )
        else:
            text = f"Met: all {len(group)} {what} read back within ±{given(limit)} % of nominal; the worst is {shown}."
        return Requirement(name, not bad, abs(worst.percent), limit, text + blank_note, LABELS[name], unit="%")

    if rest:
        what = "standards" if lowest_limit is None else "standards above the lowest level"
        out.append(judge("back_calculated_within_percent", rest, main, what))
    else:
        out.append(_not_judged("back_calculated_within_percent", main, "every standard is at the lowest level"))
    if lowest_limit is not None:
        what = f"standards at the lowest level ({given(lowest)}{x_unit})"
        out.append(judge("lowest_within_percent", at_lowest, lowest_limit, what))
    return out


def _bias(rule: BiasLimit, ev: Evidence, lvl: str, y_unit: str, x_unit: str) -> list[Requirement]:
    out: list[Requirement] = []
    if ev.bias is None:
        return [_not_judged("max_bias", _bias_limit(rule, a), ev.bias_reason, at=a) for a in rule.at]
    for b in ev.bias:
        limit = _bias_limit(rule, b.at)
        if not math.isfinite(b.estimate):
            out.append(_not_judged("max_bias", limit, "the fitted value there is not a finite number", at=b.at))
            continue
        met = abs(b.estimate) <= limit
        how = _limit_words(rule, b.at, y_unit)
        source = f", read from the {_LINE_NAMES.get(ev.bias_line, ev.bias_line)} line" if ev.bias_line else ""
        figure = (
            f"the bias at {given(b.at)}{x_unit}{source} is {num(b.estimate)}{y_unit} "
            f"({lvl} interval {num(b.ci_low)} to {num(b.ci_high)})"
        )
        if met:
            text = f"Met: {figure}, within ±{how}"
            if b.ci_low < -limit or b.ci_high > limit:
                text += "; the interval reaches past the limit, so these data cannot show that the true bias is inside"
        else:
            text = f"Not met: {figure}, beyond ±{how}"
        if ev.x_range is not None and not ev.x_range[0] <= b.at <= ev.x_range[1]:
            lo, hi = ev.x_range
            text += (
                f"; {given(b.at)} lies outside the data ({num(lo)} to {num(hi)}), so the line is extended to reach it"
            )
        out.append(
            Requirement(
                "max_bias", met, b.estimate, limit, text + ".", LABELS["max_bias"], (b.ci_low, b.ci_high), b.at,
                unit=y_unit.strip(),
            )
        )  # fmt: skip
    return out


def _bias_limit(rule: BiasLimit, at: float) -> float:
    """The allowed |bias| at a level: the absolute limit, the percentage of the level, or the larger of the two
    when both are given (common practice: "± 0.1 mg/L or ± 5 %, whichever is greater")."""
    parts = []
    if rule.limit is not None:
        parts.append(rule.limit)
    if rule.limit_percent is not None:
        parts.append(rule.limit_percent / 100 * abs(at))
    return max(parts)


def _limit_words(rule: BiasLimit, at: float, y_unit: str) -> str:
    if rule.limit is not None and rule.limit_percent is not None:
        return (
            f"{given(_bias_limit(rule, at))}{y_unit} (the larger of {given(rule.limit)}{y_unit} and "
            f"{given(rule.limit_percent)} % of the level)"
        )
    if rule.limit_percent is not None:
        return f"{given(_bias_limit(rule, at))}{y_unit} ({given(rule.limit_percent)} % of the level)"
    return f"{given(rule.limit)}{y_unit}"


def judge(report: FitReport, spec: RequirementSpec | None, ev: Evidence) -> tuple[Requirement, ...]:
    """Every declared criterion judged, in the README's order; ``()`` when nothing is declared."""
    if spec is None:
        return ()
    units = dict(report.units)
    x_col = report.chart.x if report.chart else None
    y_unit = _unit(units, report.response)
    x_unit = _unit(units, x_col)
    lvl = fmt_level(report.level)
    slope = report.coefficient(report.compare_term) if report.compare_term else None
    intercept = report.coefficient("Intercept")
    term = f"the slope ({report.compare_term})" if report.compare_term else "the slope"
    no_slope = "the model has no term to compare besides the intercept"
    no_intercept = "the model has no intercept (it is fitted through zero)"
    out: list[Requirement] = []
    if spec.min_r_squared is not None:
        r2 = report.r_squared
        if r2 is None or not math.isfinite(r2):
            out.append(_not_judged("min_r_squared", spec.min_r_squared, "R² is not defined for this fit"))
        else:
            met = r2 >= spec.min_r_squared
            text = (
                f"{'Met' if met else 'Not met'}: R² = {rsquared(r2)}, "
                f"{'at least' if met else 'below'} {given(spec.min_r_squared)}."
            )
            if report.weights:
                text = text[:-1] + " (R² of the weighted fit)."
            out.append(Requirement("min_r_squared", met, r2, spec.min_r_squared, text, LABELS["min_r_squared"]))
    # The criteria on the slope and the intercept, in the order the page lists them: (key, bounds declared, the
    # coefficient, its name in the text, its unit, why it may be missing).
    the_slope, the_intercept = (slope, term, "", no_slope), (intercept, "the intercept", y_unit, no_intercept)
    for key, window, (coefficient, what, unit, why_missing) in (
        ("slope_within", spec.slope_within, the_slope),
        ("intercept_within", spec.intercept_within, the_intercept),
    ):
        if window is not None:
            out.append(_window(key, coefficient, window, what=what, lvl=lvl, unit=unit, why_missing=why_missing))
    for key, target, (coefficient, what, unit, why_missing) in (
        ("slope_interval_includes", spec.slope_interval_includes, the_slope),
        ("intercept_interval_includes", spec.intercept_interval_includes, the_intercept),
    ):
        if target is not None:
            out.append(_includes(key, coefficient, target, what=what, lvl=lvl, unit=unit, why_missing=why_missing))
    if spec.max_residual_sd is not None:
        out.append(_residual_sd(report, spec.max_residual_sd, y_unit))
    out += _read_back(spec, ev, x_unit)
    if spec.max_bias is not None:
        out += _bias(spec.max_bias, ev, lvl, y_unit, x_unit)
    if spec.min_n is not None:
        n = report.n or 0
        met = n >= spec.min_n
        text = f"{'Met' if met else 'Not met'}: {n} rows were used, {'at least' if met else 'fewer than'} {spec.min_n}."
        out.append(Requirement("min_n", met, float(n), float(spec.min_n), text, LABELS["min_n"]))
    return tuple(out)


def _residual_sd(report: FitReport, limit: float, y_unit: str) -> Requirement:
    name = "max_residual_sd"
    sd = report.residual_sd_y if report.weights else report.residual_std_error
    if sd is None or not math.isfinite(sd):
        return _not_judged(name, limit, "the residual standard deviation is not defined (no degrees of freedom left)")
    met = sd <= limit
    what = "the residual standard deviation"
    if report.weights:
        what = "the standard deviation of the plain (unweighted) residuals"
    text = (
        f"{'Met' if met else 'Not met'}: {what} is {num(sd)}{y_unit}, "
        f"{'at most' if met else 'above'} {given(limit)}{y_unit}."
    )
    return Requirement(name, met, sd, limit, text, LABELS[name], unit=y_unit.strip())
