"""The boundary between statistics and presentation: one frozen report per dataset.

A :class:`FitReport` holds plain numbers, strings, tuples and small frozen
dataclasses — never a statsmodels or pandas object — so it can cross process
boundaries, be cached as ``fit.json`` and be rendered without refitting.
:func:`to_json` / :func:`from_json` round-trip it exactly (NaN and ±inf are
written as ``null``, as the output contract asks).
"""

from __future__ import annotations

import dataclasses
import functools
import json
import math
import types
import typing
from dataclasses import dataclass, field
from typing import Any, Literal

from sitegen.jsontext import compact

Status = Literal["ok", "warn", "error"]
Level = Literal["error", "warning", "note"]
FORMAT_VERSION = 1


@dataclass(frozen=True, slots=True)
class Message:
    """Something the reader must know about the dataset."""

    level: Level
    text: str


@dataclass(frozen=True, slots=True)
class Coefficient:
    """One model term's estimate and its uncertainty."""

    term: str
    estimate: float
    std_error: float
    t_stat: float
    p_value: float
    ci_low: float
    ci_high: float
    robust_std_error: float | None = None
    robust_ci_low: float | None = None
    robust_ci_high: float | None = None
    robust_p_value: float | None = None


@dataclass(frozen=True, slots=True)
class AnovaLine:
    """A row of the sequential analysis-of-variance table."""

    source: str
    df: int
    sum_sq: float
    mean_sq: float
    f_stat: float | None
    p_value: float | None


@dataclass(frozen=True, slots=True)
class Diagnostic:
    """The verdict of one model check."""

    check: str
    label: str
    statistic: float | None
    p_value: float | None
    flag: bool
    text: str
    advice: str = ""
    rows: tuple[int, ...] = ()  # CSV rows concerned
    #: how it was computed when the file was read in chunks: "streamed" (every row, one pass), "all rows"
    #: (few enough rows to hold), "not computed" (it needs every row at once); "" when the file was read whole
    basis: str = ""


def check_warning(d: Diagnostic) -> Message:
    """The warning a flagged check adds to the report's messages (the page shows it once, with the check)."""
    return Message("warning", f"{d.label}: {d.text} {d.advice}".strip())


@dataclass(frozen=True, slots=True)
class FlaggedPoint:
    """An observation past at least one influence cut-off."""

    row: int
    reasons: tuple[str, ...]
    leverage: float
    studentized_residual: float
    cooks_distance: float
    dffits: float


@dataclass(frozen=True, slots=True)
class AltLine:
    """A straight line by another criterion than vertical least squares."""

    method: str
    label: str
    slope: float
    intercept: float
    slope_ci_low: float
    slope_ci_high: float
    intercept_ci_low: float
    intercept_ci_high: float
    interval_method: str
    linear: bool | None = None  # Passing–Bablok: the cusum test finds no departure from linearity
    cusum_max: float | None = None
    cusum_critical: float | None = None
    note: str = ""


@dataclass(frozen=True, slots=True)
class Agreement:
    """Bland–Altman difference analysis of a method comparison (y − x, or its percent of the mean)."""

    scale: str  # "absolute" or "percent"
    n: int
    mean_difference: float
    mean_difference_ci_low: float
    mean_difference_ci_high: float
    sd_difference: float
    limit_low: float
    limit_high: float
    limit_low_ci_low: float
    limit_low_ci_high: float
    limit_high_ci_low: float
    limit_high_ci_high: float
    limit_se: float
    multiplier: float
    trend_slope: float
    trend_slope_ci_low: float
    trend_slope_ci_high: float
    trend_p_value: float
    trend_flag: bool
    method: str


@dataclass(frozen=True, slots=True)
class BiasAt:
    """Expected bias of the method under test at one decision level, from the recommended line."""

    at: float
    estimate: float
    ci_low: float
    ci_high: float
    percent: float
    percent_ci_low: float
    percent_ci_high: float
    line: str


@dataclass(frozen=True, slots=True)
class ReadBackLevel:
    """One calibration standard level read back from the line."""

    nominal: float
    replicates: int
    found: float
    percent: float
    deviation: float
    found_each: tuple[float, ...]
    percent_each: tuple[float, ...]


@dataclass(frozen=True, slots=True)
class WeightingOption:
    """One candidate weighting of a calibration line and how well it reads the standards back."""

    weighting: str
    slope: float
    intercept: float
    sum_abs_percent: float
    max_abs_percent: float
    chosen: bool


@dataclass(frozen=True, slots=True)
class LinearityCheck:
    """Mandel's fitting test of a calibration line against a quadratic."""

    n: int
    ssr_line: float
    ssr_quadratic: float
    statistic: float
    df_den: int
    critical: float
    p_value: float
    probability: float
    linear: bool
    text: str


@dataclass(frozen=True, slots=True)
class Calibration:
    """An x value estimated back from a measured response."""

    response: float
    readings: int
    estimate: float
    std_error: float
    ci_low: float
    ci_high: float
    method: str
    bounded: bool
    extrapolated: bool = False  # the estimate lies outside the range of x in the data


@dataclass(frozen=True, slots=True)
class DetectionLimits:
    """Detection and quantitation limits implied by the calibration line."""

    lod: float
    loq: float
    convention: str
    basis: str


@dataclass(frozen=True, slots=True)
class Prediction:
    """The fitted value and its intervals at chosen predictor values."""

    at: tuple[tuple[str, float], ...]
    fitted: float
    std_error: float
    mean_ci_low: float
    mean_ci_high: float
    pred_low: float
    pred_high: float
    extrapolated: bool = False  # a predictor value lies outside its range in the data


@dataclass(frozen=True, slots=True)
class ClaimTest:
    """A declared linear hypothesis on the coefficients and its test."""

    claim: str
    statistic: float
    test: str  # "t" or "F"
    df_num: int
    df_den: int
    p_value: float
    rejected: bool
    conclusion: str


@dataclass(frozen=True, slots=True)
class GroupLine:
    """One group's own line when the sidecar names a grouping column."""

    group: str
    n: int
    slope: float
    intercept: float
    slope_ci_low: float
    slope_ci_high: float


@dataclass(frozen=True, slots=True)
class GroupComparison:
    """Separate lines per group and the test that their slopes are equal."""

    column: str
    lines: tuple[GroupLine, ...]
    f_stat: float | None
    df_num: int
    df_den: int
    p_value: float | None
    conclusion: str


@dataclass(frozen=True, slots=True)
class Requirement:
    """One declared acceptance criterion judged against the fit (``fit.json``'s ``requirements``).

    ``value`` is the figure judged, ``limit`` the declared limit (a number, or ``[low, high]`` for a window),
    ``interval`` the figure's confidence interval where it has one. ``judged`` is false when the data cannot
    answer the criterion (e.g. no intercept to compare); such a criterion counts as not met.
    """

    name: str
    met: bool
    value: float | None
    limit: float | tuple[float, float] | None
    text: str
    label: str = ""
    interval: tuple[float, float] | None = None
    at: float | None = None
    judged: bool = True
    unit: str = ""


@dataclass(frozen=True, slots=True)
class ChartData:
    """The numbers the charts draw: observed points (perhaps a sample) and band grids."""

    x: str | None  # the single predictor column, when there is one
    y: str
    point_columns: tuple[str, ...] = ()
    points: tuple[tuple[float | None, ...], ...] = ()
    band_columns: tuple[str, ...] = ()
    band: tuple[tuple[float | None, ...], ...] = ()
    sampled: bool = False
    n_total: int = 0
    density_columns: tuple[str, ...] = ()
    density: tuple[tuple[float | None, ...], ...] = ()
    point_groups: tuple[str, ...] = ()  # group label of each point, when a group column is set
    spread_columns: tuple[str, ...] = ()  # bins of the standardized residuals of all rows
    spread: tuple[tuple[float, ...], ...] = ()


@dataclass(frozen=True, slots=True)
class Chunked:
    """How a file too large to hold was read and fitted: in chunks of rows, in two passes (sitegen/stream)."""

    megabytes: float  # the file's size
    threshold_megabytes: float  # stream_above_megabytes that chose the chunked reading
    chunk_rows: int
    chunks: int
    passes: int


@dataclass(frozen=True, slots=True)
class FitReport:
    """Everything known about one dataset after fitting: the contract's ``fit.json``."""

    dataset: str
    source: str
    section: str
    title: str
    status: Status
    model: str
    level: float
    description: str = ""
    tags: tuple[str, ...] = ()
    model_assumed: bool = False
    response: str = ""
    terms: tuple[str, ...] = ()
    variables: tuple[str, ...] = ()
    units: tuple[tuple[str, str], ...] = ()
    weights: str | None = None
    n: int | None = None
    n_rows: int | None = None
    dropped_rows: tuple[tuple[int, str], ...] = ()
    df_model: int | None = None
    df_resid: int | None = None
    r_squared: float | None = None
    adj_r_squared: float | None = None
    residual_std_error: float | None = None
    f_stat: float | None = None
    f_p_value: float | None = None
    condition_number: float | None = None
    coefficients: tuple[Coefficient, ...] = ()
    anova: tuple[AnovaLine, ...] = ()
    messages: tuple[Message, ...] = ()
    diagnostics: tuple[Diagnostic, ...] = ()
    flagged: tuple[FlaggedPoint, ...] = ()  # at most the 500 most influential flagged rows
    flagged_total: int = 0
    # per-group slopes differ: the rows flagged against each group's own line (the recommended model)
    group_flagged: tuple[FlaggedPoint, ...] = ()
    group_flagged_total: int = 0
    cutoffs: tuple[tuple[str, float], ...] = ()
    lines: tuple[AltLine, ...] = ()
    lines_text: str = ""
    calibration: tuple[Calibration, ...] = ()
    limits: DetectionLimits | None = None
    predictions: tuple[Prediction, ...] = ()
    claims: tuple[ClaimTest, ...] = ()
    groups: GroupComparison | None = None
    compare_term: str | None = None
    chart: ChartData | None = None
    input_sha256: str = ""
    reading: tuple[tuple[str, str], ...] = field(default=())  # how the CSV was read (delimiter, …)
    purpose: str = "relation"  # "relation", "comparison" or "calibration"
    agreement: Agreement | None = None
    agreement_percent: Agreement | None = None
    bias: tuple[BiasAt, ...] = ()
    bias_line: str = ""  # the method of the line the bias is read from
    bias_reason: str = ""
    comparison_text: str = ""
    back_calculated: tuple[ReadBackLevel, ...] = ()
    weighting: str | None = None  # "none", "1/x", "1/x²" or "1/y²" when the sidecar sets or chooses one
    weighting_options: tuple[WeightingOption, ...] = ()
    weighting_reason: str = ""
    linearity: LinearityCheck | None = None
    working_range: tuple[float, float] | None = None
    requirements: tuple[Requirement, ...] = ()
    excluded_rows: tuple[tuple[int, str], ...] = ()  # CSV rows the sidecar leaves out, with the reasons given
    responsible: tuple[tuple[str, str], ...] = ()  # analyst, reviewer, method reference as declared
    pooled_contrast: bool = False  # per-group slopes differ: the pooled line is shown only as a contrast
    residual_sd_y: float | None = None  # weighted fits: the scatter of the plain residuals, in y units
    chunked: Chunked | None = None  # the file was read and fitted in chunks (how), else None

    def first_message(self, *levels: Level) -> Message | None:
        """The first message of the first of ``levels`` that has one (e.g. the first error, else warning)."""
        for level in levels:
            for m in self.messages:
                if m.level == level:
                    return m
        return None

    def coefficient(self, term: str) -> Coefficient | None:
        """The named term's coefficient, if the model has it."""
        return next((c for c in self.coefficients if c.term == term), None)

    @property
    def requirements_state(self) -> Literal["met", "unmet", "none"]:
        """``met`` when every declared requirement is met, ``unmet`` when one is not, ``none`` when none is declared.

        A dataset that failed has no verdict on its requirements: ``none`` (its status already says it failed).
        """
        if not self.requirements:
            return "none"
        return "met" if all(q.met for q in self.requirements) else "unmet"


# --- JSON codec -------------------------------------------------------------------------------


def _encode(value: Any) -> object:
    kind: Any = type(value)
    if kind is float:
        return value if math.isfinite(value) else None
    if kind is tuple or kind is list:
        try:  # fast path: a run of numbers, all finite, is written as it is (sum runs in C)
            if math.isfinite(sum(value)):
                return value
        except TypeError:
            pass
        return [_encode(v) for v in value]
    if hasattr(kind, "__dataclass_fields__"):
        return {name: _encode(getattr(value, name)) for name in _field_names(kind)}
    if isinstance(value, float):  # numpy floats and other float subclasses
        return float(value) if math.isfinite(value) else None
    return value


@functools.cache
def _field_names(kind: Any) -> tuple[str, ...]:
    return tuple(f.name for f in dataclasses.fields(kind))


def to_json(report: FitReport) -> str:
    """Serialise with sorted keys and shortest round-trip floats."""
    body = _encode(report)
    assert isinstance(body, dict)
    body["format_version"] = FORMAT_VERSION
    return compact(body) + "\n"


Decoder = typing.Callable[[Any], Any]


def _float(v: Any) -> float:
    return float("nan") if v is None else float(v)


def _opt_float(v: Any) -> float | None:
    return None if v is None else float(v)


def _same(v: Any) -> Any:
    return v


@functools.cache
def _decoder(tp: Any) -> Decoder:
    """A function turning parsed JSON into a value of type ``tp`` (built once per type)."""
    origin = typing.get_origin(tp)
    if tp is float:
        return _float
    if tp in (int, str, bool) or origin is Literal or tp is Any or tp is object:
        return _same
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(tp) if a is not type(None)]
        if args == [float]:
            return _opt_float
        if len(args) > 1:  # e.g. a number or a [low, high] pair: chosen by the JSON value's kind
            by_kind = [(typing.get_origin(a) is tuple, _decoder(a)) for a in args]
            return lambda v: None if v is None else next(d for seq, d in by_kind if seq == isinstance(v, list))(v)
        inner = _decoder(args[0])
        return lambda v: None if v is None else inner(v)
    if origin is tuple:
        targs = typing.get_args(tp)
        if len(targs) == 2 and targs[1] is Ellipsis:
            item = _decoder(targs[0])
            if item is _same:
                return tuple
            return lambda v: tuple(map(item, v))
        items = [_decoder(a) for a in targs]
        return lambda v: tuple(f(x) for f, x in zip(items, v, strict=True))
    if dataclasses.is_dataclass(tp) and isinstance(tp, type):
        hints = typing.get_type_hints(tp)
        fields_ = [(f.name, _decoder(hints[f.name])) for f in dataclasses.fields(tp)]
        cls = tp

        def build(v: Any) -> Any:
            return cls(**{name: dec(v[name]) for name, dec in fields_ if name in v})

        return build
    raise TypeError(f"cannot decode {tp!r}")


def _decode(tp: Any, value: object) -> Any:
    return _decoder(tp)(value)


def from_json(text: str, *, light: bool = False) -> FitReport:
    """Parse ``fit.json`` back into a :class:`FitReport`; raises ``ValueError`` if malformed.

    ``light`` leaves out the chart numbers (enough for indexes, summaries and history).
    """
    try:
        body = json.loads(text)
        if body.get("format_version") != FORMAT_VERSION:
            raise ValueError("fit.json was written by another format version")
        if light:
            body.pop("chart", None)
        report = _decode(FitReport, body)
    except (KeyError, TypeError, AssertionError, AttributeError, ValueError) as exc:
        raise ValueError(f"malformed fit.json: {exc}") from exc
    assert isinstance(report, FitReport)
    return report
