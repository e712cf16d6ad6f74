"""Fit one dataset read in chunks: two passes over the file with bounded memory.

Pass 1 reads the file a chunk at a time, builds each chunk's design (:mod:`sitegen.stream.design`) and
updates the R factor of [X | y] (:mod:`sitegen.stats.rowsqr`); it also keeps each column's range and spread
(the soundness checks, the chart's grid and bins). The triangle gives the coefficients, (X'X)⁻¹ and the sums
of squares. Pass 2 reads the file again and, chunk by chunk, computes every row's fitted value, residual,
leverage (‖xᵢ'W‖², W = S·R⁻¹), studentized residual, Cook's distance, DFFITS, intervals and flags, writes
them to ``observations.csv`` as it goes (:mod:`sitegen.report.bulkcsv`), keeps the chart's fixed random
sample (the same rows the whole-file path draws) and the most influential flagged rows, counts the binned
charts, and accumulates X'r for one step of refinement and the sums the model checks need.

Model checks: Breusch–Pagan (its auxiliary regression by the same chunked QR), Durbin–Watson (neighbouring
residuals carried across chunks; the moments of d from running sums), Jarque–Bera (running moments),
curvature (RESET, its regression by the chunked QR), collinearity and influence are computed over every row
("streamed"); Shapiro–Wilk and the exact Durbin–Watson p-value where the rows are few enough to hold ("all
rows"); lack of fit, which groups every row by its setting, is "not computed". Each check's ``basis`` says
which. Rows with replicated settings are not told apart (that too needs every row): no row counts as a
designed setting, so leverage alone can flag one.

Supported: numeric formulas (``y ~ x``, polynomials, transformations), ``leave_out``, ``claims`` and
``predict_at``; weights, weighting, groups, alternative lines, calibration, comparisons, robust standard
errors and acceptance criteria are refused with a message naming the keys.
"""

from __future__ import annotations

import heapq
import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np
from numpy.typing import NDArray

from sitegen import derive
from sitegen.derive import MAX_CHART_POINTS, MAX_FLAGGED_LISTED, SAMPLE_POINTS
from sitegen.errors import DataFileError, FitError, FormulaError
from sitegen.formula import Design, assumed_formula
from sitegen.model import (
    ChartData,
    Chunked,
    Diagnostic,
    FitReport,
    FlaggedPoint,
    check_warning,
)
from sitegen.spec import DatasetSpec, Limits
from sitegen.stats import distributions as dist
from sitegen.stats import ext
from sitegen.stats.checks import CONDITION_LIMIT as COLLINEAR_CONDITION
from sitegen.stats.checks import (
    RESIDUAL_LIMIT,
    SHAPIRO_MAX_ROWS,
    VIF_LIMIT,
    WORDING,
    breusch_pagan_triangle,
    dw_beta_p,
    dw_moments_from,
    dw_outcome,
    lack_of_fit_outcome,
    reset_triangle,
)
from sitegen.stats.checks import _num as num
from sitegen.stats.durbin_watson import EXACT_MAX_ROWS, exact_cdf
from sitegen.stats.influence import LEVERAGE_ONE, Influence, PointFlags, influence_rows
from sitegen.stats.ols import EXACT_FIT_RTOL, Estimates, OlsFit, estimated_fit, row_bands
from sitegen.stats.repeats import MAX_SETTINGS, PureError, Repeats, setting_keys
from sitegen.stats.rowsqr import RowsQR, Solved, refine, solve_triangle
from sitegen.stats.shapiro import shapiro_wilk
from sitegen.stats.solver import Ext, Ops, ops
from sitegen.stats.soundness import RESCALE, _column_problem
from sitegen.stats.text import p_text
from sitegen.stream.design import ChunkDesign, Model, chunk_design, model_of
from sitegen.stream.reader import Pass, Source, chunks
from sitegen.table import Table, from_columns

FloatArray = NDArray[np.float64]
#: Rows left out for missing values that are listed by number (all are counted).
MAX_DROPPED_LISTED = 10_000
#: Rows a check names (the rest are counted).
MAX_CHECK_ROWS = MAX_FLAGGED_LISTED
_UNSUPPORTED = (
    ("weights", "a weights column"),
    ("weighting", "a weighting"),
    ("group", "a group column"),
    ("lines", "alternative lines"),
    ("calibrate", "inverse prediction"),
    ("robust", "robust standard errors"),
    ("requirements", "acceptance criteria"),
)
OBSERVATIONS = "observations.csv"


def unsupported(spec: DatasetSpec) -> list[tuple[str, str]]:
    """The sidecar keys (and what they ask for) that a chunked fit does not offer."""
    asked = [(key, what) for key, what in _UNSUPPORTED if getattr(spec, key)]
    if spec.purpose != "relation":
        asked.append(("purpose", f"purpose = {spec.purpose!r}"))
    return asked


def refuse_unsupported(spec: DatasetSpec, name: str) -> None:
    """A :class:`FitError` naming what a chunked fit does not offer, when the sidecar asks for it."""
    asked = unsupported(spec)
    if asked:
        keys = ", ".join(f"'{k}'" for k, _ in asked)
        raise FitError(
            f"{name} is read in chunks (it is at least stream_above_megabytes in size), and a chunked fit "
            f"does not offer {', '.join(w for _, w in asked)} (key(s) {keys})",
            hint="remove those keys from the sidecar, or raise [limits] stream_above_megabytes (or the sidecar's "
            "stream_above_megabytes) above the file's size so that it is read whole",
        )


@dataclass
class _Spread:
    """Count, mean, sum of squared deviations (Chan et al.'s pairwise update), smallest, largest, largest |v|."""

    n: int = 0
    mean: float = 0.0
    m2: float = 0.0
    low: float = math.inf
    high: float = -math.inf

    def add(self, v: FloatArray) -> None:
        if v.size == 0:
            return
        with np.errstate(all="ignore"):
            mean_b = float(np.sum(v) / v.size)
            d = v - mean_b
            m2_b = float(np.dot(d, d))
            n = self.n + v.size
            delta = mean_b - self.mean
            self.m2 = self.m2 + m2_b + delta * delta * self.n * v.size / n
            self.mean = self.mean + delta * v.size / n
        self.n = n
        self.low = min(self.low, float(np.min(v)))
        self.high = max(self.high, float(np.max(v)))

    @property
    def top(self) -> float:
        return max(abs(self.low), abs(self.high))


@dataclass
class _First:
    """What pass 1 found."""

    model: Model | None = None
    formula: str = ""
    assumed: bool = False
    qr: RowsQR | None = None
    n: int = 0
    chunks: int = 0
    dropped: list[tuple[int, str]] = field(default_factory=list)
    dropped_total: int = 0
    present: dict[str, bool] = field(default_factory=dict)
    y: _Spread = field(default_factory=_Spread)
    x: list[_Spread] = field(default_factory=list)  # design columns
    data: dict[str, _Spread] = field(default_factory=dict)  # the model's data columns
    x_sum: Ext = None  # column sums of the design (for the mean fitted value)
    rows_read: int = 0
    size: int = 0  # bytes
    sha256: str = ""
    notes: tuple[str, ...] = ()
    layout: tuple[tuple[str, str], ...] = ()
    repeats: Repeats = field(default_factory=Repeats)  # rows grouped by predictor setting


def _leave_out(table: Table, out: frozenset[int]) -> Table:
    if not out:
        return table
    return table.take(~np.isin(table.rows, np.fromiter(out, dtype=np.int64)))


def _first_pass(src: Source, spec: DatasetSpec, o: Ops, out: frozenset[int]) -> _First:
    first = _First()
    seen = Pass()
    name = src.name
    for raw in chunks(src, seen):
        if first.model is None:
            if spec.model:
                first.formula = spec.model
            else:
                guess = assumed_formula(raw)
                if guess is None:
                    cols = ", ".join(raw.names)
                    raise FormulaError(
                        f"{name} has no model: without a sidecar only a table of exactly two numeric columns "
                        "can be fitted",
                        hint=f'add {Path(name).stem}.toml with e.g. model = "y ~ x"; the columns are {cols}',
                    )
                first.formula, first.assumed = guess, True
            first.model = model_of(first.formula, raw.names, name)
            p = len(first.model.terms)
            first.qr = RowsQR(o, p + 1)
            first.x = [_Spread() for _ in range(p)]
            first.data = {c: _Spread() for c in first.model.used}
            first.present = dict.fromkeys(first.model.used, False)
            first.x_sum = o.zeros(p)
        model, qr = first.model, first.qr
        assert qr is not None
        cd = chunk_design(model, _leave_out(raw, out), name)
        first.chunks += 1
        for c, here in cd.present.items():
            first.present[c] = first.present[c] or here
        first.dropped_total += len(cd.dropped)
        room = MAX_DROPPED_LISTED - len(first.dropped)
        if room > 0:
            first.dropped.extend(cd.dropped[:room])
        m = len(cd.rows)
        if m == 0:
            continue
        first.n += m
        p = len(model.terms)
        qr.add(o.columns([cd.X_ext[:, j] for j in range(p)] + [cd.y_ext]))
        first.x_sum = first.x_sum + o.colsum(cd.X_ext)
        settings = _settings_of(model)
        if settings:
            first.repeats.add(cd.X[:, settings], cd.y)
        first.y.add(cd.y)
        for j in range(p):
            first.x[j].add(cd.X[:, j])
        for c, v in cd.data.items():
            first.data[c].add(v)
    first.rows_read = seen.rows
    first.sha256 = seen.sha256
    first.size = seen.size
    if seen.layout is not None:
        lay = seen.layout
        first.notes = lay.notes
        first.layout = (("delimiter", lay.delimiter), ("decimal", lay.decimal), ("encoding", lay.encoding))
    return first


def _check_first(first: _First, name: str) -> Model:
    """The whole-file design's checks, on what pass 1 found."""
    model = first.model
    assert model is not None
    for col in model.used:
        if not first.present.get(col, False):
            raise DataFileError(
                f"{name}: column {col!r}, which the model uses, is empty in every row",
                hint="fill the column in, or name another column in key 'model'",
            )
    if first.n == 0:
        raise FitError(
            f"{name}: no row has a finite value in every column the model uses ({', '.join(map(repr, model.used))})",
            hint="fill in the missing values, or check that key 'model' names the right columns",
        )
    p = len(model.terms)
    if first.n <= p:
        raise FitError(
            f"{first.n} usable row(s) for {p} coefficient(s): the fit needs more rows than coefficients "
            "to estimate its uncertainty",
            hint=f"add data (at least {p + 1} rows with all model columns present) or simplify the model",
        )
    for j, term in enumerate(model.terms):
        s = first.x[j]
        if model.has_intercept and term != "Intercept" and s.low == s.high:
            raise FitError(
                f"{name}: term {term!r} has the same value ({s.low:.6g}) in all {first.n} rows used, "
                "so its effect cannot be told apart from the intercept",
                hint=f"the data need at least two different values of {term}; check that the model names "
                "the right column",
            )
    response = model.plan.y_name
    if model.has_intercept and first.y.low == first.y.high:
        problem: str | None = (
            f"the response {response} has the same value ({first.y.low:g}) in every row used, so there is no "
            "variation for the line to explain: R² is undefined and the fit cannot be judged"
        )
    elif not model.has_intercept and first.y.low == first.y.high == 0:
        problem = f"the response {response} is zero in every row used: R² is undefined and the fit cannot be judged"
    else:
        problem = _column_problem(f"the response {response}", first.y.m2, first.y.top)
        for j, term in enumerate(model.terms):
            s = first.x[j]
            if problem or term == "Intercept" or s.low == s.high:
                continue
            problem = _column_problem(f"the model term {term}", s.m2, s.top)
    if problem:
        raise FitError(f"{name}: {problem}", hint=RESCALE if "compute with" in problem else None)
    return model


class _Top:
    """The k rows with the largest score (ties: the earlier row), with a payload per row."""

    def __init__(self, k: int) -> None:
        self.k = k
        self._heap: list[tuple[float, int, tuple[Any, ...]]] = []  # (score, -index, payload): smallest first

    def add(self, score: FloatArray, index: NDArray[np.int64], payload: Callable[[int], tuple[Any, ...]]) -> None:
        """Offer rows (``payload(j)`` makes the j-th one's payload, only for the rows kept)."""
        order = np.lexsort((index, -score))[: self.k]  # the chunk's own best k, best first
        for j in order.tolist():
            item = (float(score[j]), -int(index[j]), ())
            if len(self._heap) < self.k:
                heapq.heappush(self._heap, (item[0], item[1], payload(j)))
            elif item[:2] > self._heap[0][:2]:
                heapq.heapreplace(self._heap, (item[0], item[1], payload(j)))
            else:
                break  # the rest of this chunk's rows score lower still

    def items(self) -> list[tuple[int, tuple[Any, ...]]]:
        """(index, payload) in row order."""
        return sorted((-neg, pay) for _, neg, pay in self._heap)


_SPREAD_EDGES: FloatArray = np.arange(
    -derive.SPREAD_REACH_MAX, derive.SPREAD_REACH_MAX + derive.SPREAD_BIN / 2, derive.SPREAD_BIN
)


@dataclass
class _Second:
    """What pass 2 accumulates."""

    xtr: Ext
    rr: Ext
    index: int = 0  # rows fitted so far (0-based index of the next)
    flagged_total: int = 0
    listed: _Top = field(default_factory=lambda: _Top(MAX_FLAGGED_LISTED))
    chart_flagged: _Top = field(default_factory=lambda: _Top(MAX_CHART_POINTS - SAMPLE_POINTS))
    sample: dict[int, tuple[Any, ...]] = field(default_factory=dict)
    density: FloatArray | None = None
    spread: FloatArray = field(default_factory=lambda: np.zeros(len(_SPREAD_EDGES) - 1))
    spread_top: float = 0.0
    spread_n: int = 0
    # checks
    last_e: float | None = None
    dw_num: float = 0.0
    lag1: float = 0.0
    moments: NDArray[np.longdouble] = field(default_factory=lambda: np.zeros(5, dtype=np.longdouble))
    e2_low: float = math.inf
    e2_high: float = -math.inf
    bp: RowsQR | None = None
    reset: RowsQR | None = None
    # Durbin–Watson moments: Σ dq'dq, Σ‖dq_{i-1} − dq_i‖², first and last dq, the last q row
    dq_gram: FloatArray | None = None
    dq_diff: float = 0.0
    dq_first: FloatArray | None = None
    dq_last: FloatArray | None = None
    q_last: FloatArray | None = None
    q_all: list[FloatArray] = field(default_factory=list)
    e_all: list[FloatArray] = field(default_factory=list)
    one: int = 0
    far: int = 0
    strong: int = 0
    t_max: float = 0.0
    d_max: float = 0.0
    d_any: bool = False
    check_rows: list[int] = field(default_factory=list)


_CHART_COLUMNS = ("row", "y", "fitted", "residual", "studentized", "leverage", "cooks", "std_resid", "flag", "x")


@dataclass(frozen=True, slots=True)
class _Setup:
    """Everything pass 2 needs from pass 1."""

    model: Model
    solved: Solved
    summary: OlsFit
    o: Ops
    n: int
    sample: frozenset[int]
    x_col: str | None
    density_range: tuple[tuple[float, float], tuple[float, float]] | None
    cutoffs: tuple[float, float, float, float]
    exact: bool
    mean_fitted: Ext
    fitted_scale: float
    name: str
    reading_weight: float
    t_cut: float
    cooks_cut: float
    sha256: str  # of the file as the first pass read it
    pure: PureError | None  # the rows grouped by setting (None: too many settings to keep)
    repeated: NDArray[Any] | None  # the keys of settings measured more than once, sorted (None: unknown)


def _skeleton(model: Model, first: _First) -> Design:
    """A design without rows for the whole-file helpers that only look at its terms (and at the range of
    its columns: ``data`` holds each column's lowest and highest value)."""
    ranges = {c: np.array([s.low, s.high]) for c, s in first.data.items()}
    empty = np.empty((0, len(model.terms)))
    return Design(
        X=empty,
        y=np.empty(0),
        terms=model.terms,
        response=model.plan.y_name,
        rows=np.empty(0, dtype=np.int64),
        dropped=(),
        has_intercept=model.has_intercept,
        variables=model.used,
        data=from_columns(ranges),
        design_info=model.plan,
        X_ext=None,
        y_ext=None,
        simple=True,
    )


def _summary(  # noqa: PLR0917 - the triangle's pieces
    model: Model, solved: Solved, o: Ops, n: int, level: float, beta_s: Ext, ssr_ext: Ext
) -> OlsFit:
    beta_ext = beta_s * o.of(solved.scale)
    ssr = float(o.f(ssr_ext))
    yy = float(o.f(solved.yy))
    if math.sqrt(max(ssr, 0.0)) <= EXACT_FIT_RTOL * math.sqrt(yy):
        ssr = 0.0
    tss = float(o.f(solved.tss_centred)) if model.has_intercept and solved.tss_centred is not None else yy
    root, xtx_inv = solved.root, o.f(o.dot(solved.root, solved.root.T))
    est = Estimates(
        model.terms, o.f(beta_ext), xtx_inv, o.f(root), o.f(solved.effects), solved.condition, beta_ext, root
    )
    return estimated_fit(est, n=n, has_intercept=model.has_intercept, level=level, ssr=max(ssr, 0.0), tss=tss)


def _settings_of(model: Model) -> list[int]:
    """The design columns that make a row's predictor setting (all but the intercept)."""
    return [j for j, t in enumerate(model.terms) if t != "Intercept"]


def _designed(setup: _Setup, cd: ChunkDesign) -> NDArray[np.bool_] | None:
    """The chunk's rows whose setting was measured more than once (as the whole-file path's designed rows)."""
    rep = setup.repeated
    if rep is None or not len(rep):
        return None
    keys = setting_keys(cd.X[:, _settings_of(setup.model)])
    at = np.minimum(np.searchsorted(rep, keys), len(rep) - 1)
    return np.asarray(rep[at] == keys, dtype=bool)


def _flags(
    infl: Any, cut: tuple[float, float, float, float], designed: NDArray[np.bool_] | None, strong_cut: float
) -> PointFlags:
    """:func:`sitegen.stats.influence.flag_points` for some rows, with the cut-offs of all rows; ``designed``
    marks rows of a setting measured more than once, which leverage alone does not flag."""
    lev_cut, res_cut, cooks_cut, dffits_cut = cut
    h = np.asarray(infl.leverage)
    with np.errstate(invalid="ignore"):
        high = h > lev_cut
        one = h > LEVERAGE_ONE
        resid = np.abs(infl.studentized_residual) > res_cut
        cooks = infl.cooks_distance > cooks_cut
        dffits = np.abs(infl.dffits) > dffits_cut
    marked = high | one | resid | cooks | dffits
    if designed is not None:
        with np.errstate(invalid="ignore"):
            strong = infl.cooks_distance > strong_cut
        marked &= ~designed | resid | one | strong
    return PointFlags(high, one, resid, cooks, dffits, *cut, tuple(np.flatnonzero(marked).tolist()), marked)


@dataclass(frozen=True, slots=True)
class _Rows:
    """One chunk's per-row results."""

    rows: NDArray[np.int64]  # CSV rows
    index: NDArray[np.int64]  # 0-based among the rows fitted
    y: FloatArray
    x: FloatArray  # the single predictor (NaN without one)
    fitted: FloatArray
    resid: FloatArray
    infl: Influence
    codes: NDArray[np.intp]  # the flags' reasons, as bit masks
    marked: NDArray[np.bool_]

    def chart(self, i: int, flag: float) -> tuple[Any, ...]:
        """The chart's values of row i, in ``_CHART_COLUMNS`` order."""
        infl = self.infl
        return (
            float(self.rows[i]),
            float(self.y[i]),
            float(self.fitted[i]),
            float(self.resid[i]),
            float(infl.studentized_residual[i]),
            float(infl.leverage[i]),
            float(infl.cooks_distance[i]),
            float(infl.standardized_residual[i]),
            flag,
            float(self.x[i]),
        )

    def listed(self, i: int) -> tuple[Any, ...]:
        """The fields of row i's :class:`FlaggedPoint`."""
        infl = self.infl
        return (
            int(self.rows[i]),
            derive._reasons_of(int(self.codes[i])),
            float(infl.leverage[i]),
            float(infl.studentized_residual[i]),
            float(infl.cooks_distance[i]),
            float(infl.dffits[i]),
        )


_FLAG_TEXTS = np.array(["; ".join(derive._reasons_of(code)) for code in range(1 << len(derive._REASONS))], dtype=object)


def _second_pass(src: Source, setup: _Setup, out: frozenset[int], sink: BinaryIO | None) -> _Second:
    o, model, solved = setup.o, setup.model, setup.solved
    p = len(model.terms)
    acc = _Second(xtr=o.zeros(p), rr=o.zeros(()))
    acc.bp = RowsQR(o, p + 1) if model.has_intercept and model.terms[0] == "Intercept" else None
    acc.reset = RowsQR(o, p + 3)
    if setup.density_range is not None:
        acc.density = np.zeros((derive.DENSITY_BINS, derive.DENSITY_BINS))
    scale_row = _as_row(o, o.of(solved.scale))
    rms = math.sqrt(setup.summary.ssr / setup.n) if setup.summary.ssr > 0 else 1.0
    seen = Pass()
    for raw in chunks(src, seen):
        cd = chunk_design(model, _leave_out(raw, out), setup.name)
        m = len(cd.rows)
        if m == 0:
            continue
        Xs = cd.X_ext * scale_row
        r = cd.y_ext - o.dot(Xs, solved.beta_s)
        acc.xtr = acc.xtr + o.dot(Xs.T, r)
        acc.rr = acc.rr + o.dot(r, r)
        z = o.dot(cd.X_ext, solved.root)
        h = o.f(o.rowsum(z * z))
        if setup.exact:
            resid, fitted, r = np.zeros(m), cd.y, o.zeros(m)
        else:
            resid, fitted = o.f(r), o.f(cd.y_ext - r)
        infl = influence_rows(h, resid, setup.summary.ssr, setup.summary.df_resid, p)
        flags = _flags(infl, setup.cutoffs, _designed(setup, cd), setup.cooks_cut)
        x = cd.data[setup.x_col] if setup.x_col is not None else np.full(m, np.nan)
        index = np.arange(acc.index, acc.index + m, dtype=np.int64)
        acc.index += m
        rows = _Rows(cd.rows, index, cd.y, x, fitted, resid, infl, derive._reason_codes(flags),
                     np.asarray(flags.marked, dtype=bool))  # fmt: skip
        if sink is not None:
            _write(sink, setup, cd, rows, first=acc.index == m)
        _keep_chart_rows(acc, setup, rows)
        _count_bins(acc, setup, cd, rows)
        _check_sums(acc, setup, cd, r, resid, z, infl, rms)
    if seen.sha256 != setup.sha256:
        raise DataFileError(
            f"{setup.name} changed while it was being read (between the two passes over it)",
            hint="build again once the file is complete",
        )
    return acc


def _write(sink: BinaryIO, setup: _Setup, cd: ChunkDesign, rows: _Rows, *, first: bool) -> None:
    """Append a chunk's rows to observations.csv, with the whole-file path's columns."""
    from sitegen.report import bulkcsv  # noqa: PLC0415

    model = setup.model
    b = row_bands(replace(setup.summary, fitted=rows.fitted, leverage=rows.infl.leverage, n=len(rows.rows)), None,
                  setup.reading_weight)  # fmt: skip
    cols: dict[str, NDArray[Any]] = {"row": cd.rows}
    for v in model.used:
        cols[v] = cd.data[v]
    if model.plan.y_name not in cols:
        cols[model.plan.y_name] = cd.y
    cols |= {
        "fitted": rows.fitted,
        "residual": rows.resid,
        "mean_ci_low": b.mean_low,
        "mean_ci_high": b.mean_high,
        "pred_low": b.pred_low,
        "pred_high": b.pred_high,
        "leverage": rows.infl.leverage,
        "studentized_residual": rows.infl.studentized_residual,
        "cooks_distance": rows.infl.cooks_distance,
        "dffits": rows.infl.dffits,
        "flags": _FLAG_TEXTS[rows.codes],
    }
    if first:
        bulkcsv.write_header(sink, tuple(cols))
    bulkcsv.write_rows(sink, tuple(cols.values()))


def _keep_chart_rows(acc: _Second, setup: _Setup, rows: _Rows) -> None:
    """The chart's rows: the random sample, the most influential flagged rows (and those listed)."""
    if setup.sample:
        picked = np.fromiter(setup.sample, dtype=np.int64)
        for i in np.flatnonzero(np.isin(rows.index, picked)).tolist():
            acc.sample[int(rows.index[i])] = rows.chart(i, 1.0 if rows.marked[i] else 0.0)
    where = np.flatnonzero(rows.marked)
    acc.flagged_total += int(where.size)
    if not where.size:
        return
    cooks = np.asarray(rows.infl.cooks_distance)[where]
    if setup.sample:
        acc.chart_flagged.add(
            np.nan_to_num(cooks, nan=-np.inf), rows.index[where], lambda j: rows.chart(int(where[j]), 1.0)
        )
    acc.listed.add(np.nan_to_num(cooks, nan=np.inf), rows.index[where], lambda j: rows.listed(int(where[j])))


def _count_bins(acc: _Second, setup: _Setup, cd: ChunkDesign, rows: _Rows) -> None:
    """The density of the points and the bins of the standardized residuals, counted over every row."""
    if acc.density is not None and setup.density_range is not None:
        counts, _, _ = np.histogram2d(rows.x, cd.y, bins=derive.DENSITY_BINS, range=setup.density_range)
        acc.density += counts
    std = np.asarray(rows.infl.standardized_residual)
    finite = std[np.isfinite(std)]
    if finite.size:
        acc.spread_n += int(finite.size)
        acc.spread_top = max(acc.spread_top, float(np.max(np.abs(finite))))
        lim = derive.SPREAD_REACH_MAX
        binned, _ = np.histogram(np.clip(finite, -lim, lim), bins=_SPREAD_EDGES)
        acc.spread += binned


def _as_row(o: Ops, v: Ext) -> Ext:
    if o.dd:
        return ext.DD(v.hi[None, :], v.lo[None, :])
    return v[None, :]


def _check_sums(  # noqa: PLR0917 - one chunk's pieces
    acc: _Second, setup: _Setup, cd: ChunkDesign, r: Ext, e: FloatArray, z: Ext, infl: Influence, rms: float
) -> None:
    o, model = setup.o, setup.model
    m = len(e)
    # Durbin–Watson and the lag-one correlation, carrying the last residual across chunks
    prev = np.concatenate([[acc.last_e], e]) if acc.last_e is not None else e
    acc.dw_num += float(np.sum(np.diff(prev) ** 2))
    acc.lag1 += float(prev[1:] @ prev[:-1])
    acc.last_e = float(e[-1])
    # Jarque–Bera: raw moments of e / rms (extended precision)
    u = e.astype(np.longdouble) / np.longdouble(rms)
    acc.moments += np.array([m, u.sum(), (u * u).sum(), (u**3).sum(), (u**4).sum()], dtype=np.longdouble)
    e2 = e * e
    acc.e2_low = min(acc.e2_low, float(np.min(e2)))
    acc.e2_high = max(acc.e2_high, float(np.max(e2)))
    p = len(model.terms)
    if acc.bp is not None:
        acc.bp.add(o.columns([cd.X_ext[:, j] for j in range(p)] + [r * r]))
    # RESET: the design, the squared and cubed centred fitted values (scaled), the response
    fe = cd.y_ext - r
    zf = (fe - setup.mean_fitted) / o.of(setup.fitted_scale)
    assert acc.reset is not None
    acc.reset.add(o.columns([cd.X_ext[:, j] for j in range(p)] + [zf * zf, zf * zf * zf, cd.y_ext]))
    # Durbin–Watson moments from the rows of Q (= X·W)
    q = o.f(z)
    if setup.n <= EXACT_MAX_ROWS:
        acc.q_all.append(q)
    if setup.n <= SHAPIRO_MAX_ROWS:
        acc.e_all.append(e)
    full = np.vstack([acc.q_last, q]) if acc.q_last is not None else q
    dq = np.diff(full, axis=0)
    if len(dq):
        acc.dq_gram = dq.T @ dq if acc.dq_gram is None else acc.dq_gram + dq.T @ dq
        chain = np.vstack([acc.dq_last, dq]) if acc.dq_last is not None else dq
        acc.dq_diff += float(np.sum(np.diff(chain, axis=0) ** 2))
        if acc.dq_first is None:
            acc.dq_first = dq[0]
        acc.dq_last = dq[-1]
    acc.q_last = q[-1:]
    # influence check
    h = np.asarray(infl.leverage)
    t = np.asarray(infl.studentized_residual)
    cooks = np.asarray(infl.cooks_distance)
    with np.errstate(invalid="ignore"):
        one, far, strong = h > LEVERAGE_ONE, np.abs(t) > setup.t_cut, cooks > setup.cooks_cut
    acc.one += int(one.sum())
    acc.far += int(far.sum())
    acc.strong += int(strong.sum())
    acc.t_max = max(acc.t_max, float(np.max(np.abs(t), where=~np.isnan(t), initial=0.0)))
    acc.d_max = max(acc.d_max, float(np.max(cooks, where=np.isfinite(cooks), initial=0.0)))
    acc.d_any = acc.d_any or bool(np.any(np.isfinite(cooks)))
    room = MAX_CHECK_ROWS - len(acc.check_rows)
    if room > 0:
        acc.check_rows.extend(int(v) for v in cd.rows[np.flatnonzero(one | far | strong)[:room]].tolist())


def _diag(  # noqa: PLR0917 - a check's fields
    name: str, flag: bool, text: str, basis: str, stat: float | None = None, p: float | None = None
) -> Diagnostic:
    label, _, _, advice = WORDING[name]
    return Diagnostic(name, label, stat, p, flag, text, advice if flag else "", (), basis)


def _judged(  # noqa: PLR0917 - a check's fields
    name: str, stat: float, p: float, nums: str, alpha: float, basis: str
) -> Diagnostic:
    flag = p < alpha
    sentence = WORDING[name][1 if flag else 2]
    return _diag(name, flag, f"{sentence} ({nums}).", basis, stat, p)


def _checks(acc: _Second, setup: _Setup, ssr: float) -> tuple[Diagnostic, ...]:  # noqa: C901, PLR0912, PLR0915
    o, model, fit = setup.o, setup.model, setup.summary
    n, p, df = setup.n, len(model.terms), fit.df_resid
    alpha = 1 - fit.level
    streamed, held, skipped = "streamed", "all rows", "not computed"
    pred = [j for j, t in enumerate(model.terms) if t != "Intercept"]
    why = None
    if n <= p:
        why = f"With {n} rows for {p} coefficients nothing is left over to judge the residuals."
    elif math.sqrt(ssr) <= 1e-12 * math.sqrt(float(o.f(setup.solved.yy))):
        why = "The model passes through every point, so there is no scatter to examine."
    out: list[Diagnostic] = []
    # even scatter
    name = "constant_variance"
    if why:
        out.append(_diag(name, False, why, streamed))
    elif not pred:
        out.append(_diag(name, False, "There is no predictor for the scatter to change with.", streamed))
    elif acc.e2_high == acc.e2_low:
        out.append(_diag(name, False, "All residuals have the same size, so their scatter cannot change.", streamed))
    elif acc.bp is None:
        out.append(_diag(name, False, "The Breusch–Pagan test is computed for models with an intercept.", streamed))
    else:
        try:
            lm, pv = breusch_pagan_triangle(o, acc.bp.triangle(), n, model.terms)
            if math.isfinite(lm) and math.isfinite(pv):
                out.append(_judged(name, lm, pv, f"Breusch–Pagan LM = {num(lm)}, {p_text(pv)}", alpha, streamed))
            else:
                out.append(_diag(name, False, "The Breusch–Pagan test gave no usable result for these data.", streamed))
        except FitError as exc:
            out.append(_diag(name, False, f"The Breusch–Pagan test could not be computed ({exc.message}).", streamed))
    # neighbouring rows
    name = "independence"
    if why:
        out.append(_diag(name, False, why, streamed))
    elif df < 2:
        out.append(_diag(name, False, "Too few rows are left over to judge neighbouring residuals.", streamed))
    else:
        dw = acc.dw_num / ssr
        lag1 = acc.lag1 / ssr
        if n <= EXACT_MAX_ROWS:
            # no weights here: an intercept puts the constant in the span, as on the whole-file path
            pv = exact_cdf(dw, np.vstack(acc.q_all), constant_in_span=model.has_intercept)
            basis = held
        else:
            basis = streamed
            assert acc.dq_gram is not None
            assert acc.dq_first is not None
            assert acc.dq_last is not None
            aq2 = float(acc.dq_first @ acc.dq_first) + acc.dq_diff + float(acc.dq_last @ acc.dq_last)
            pv = dw_beta_p(dw, *dw_moments_from(n, acc.dq_gram, aq2, df))
        verdict = dw_outcome(dw, lag1, pv, approximate=n > EXACT_MAX_ROWS)
        if isinstance(verdict, str):
            out.append(_diag(name, False, verdict, basis))
        else:
            out.append(_judged(name, verdict[0], verdict[1], verdict[2], alpha, basis))
    # bell shape: Shapiro–Wilk where the rows can be held, Jarque–Bera from running moments
    cnt, s1, s2, s3, s4 = (float(v) for v in acc.moments)
    mu = s1 / cnt
    m2 = s2 / cnt - mu * mu
    m3 = s3 / cnt - 3 * mu * s2 / cnt + 2 * mu**3
    m4 = s4 / cnt - 4 * mu * s3 / cnt + 6 * mu * mu * s2 / cnt - 3 * mu**4
    all_equal = acc.e2_high == acc.e2_low and (m2 <= 0)
    if why:
        sw = _diag("normality_shapiro", False, why, held)
        jb = _diag("normality_jarque_bera", False, why, streamed)
    elif all_equal:
        text = "All residuals are equal, so they have no shape to judge."
        sw = _diag("normality_shapiro", False, text, held)
        jb = _diag("normality_jarque_bera", False, text, streamed)
    else:
        if 3 <= n <= SHAPIRO_MAX_ROWS:
            w, pw = shapiro_wilk(np.concatenate(acc.e_all))
            sw = _judged("normality_shapiro", w, pw, f"Shapiro–Wilk W = {w:.3f}, {p_text(pw)}", alpha, held)
        else:
            text = f"Shapiro–Wilk is computed for 3 to {SHAPIRO_MAX_ROWS:,} rows only, not {n:,}."
            sw = _diag("normality_shapiro", False, text, skipped)
        skew = m3 / m2**1.5
        kurt = m4 / m2**2
        stat = n / 6 * (skew**2 + (kurt - 3) ** 2 / 4)
        pj = dist.chi2_sf(stat, 2)
        jb = _judged(
            "normality_jarque_bera", stat, pj, f"Jarque–Bera = {num(stat)}, {p_text(pj)}; a large-sample test", alpha,
            streamed,
        )  # fmt: skip
    out += [sw, jb]
    # straightness (RESET)
    name = "curvature"
    if why:
        out.append(_diag(name, False, why, streamed))
    elif setup.fitted_scale <= 0:
        out.append(_diag(name, False, "The fitted values are all equal, so there is no bend to look for.", streamed))
    else:
        out.append(_reset(acc, setup, alpha))
    out.append(_lack_of_fit(setup, why, ssr, alpha))
    out.append(_collinearity(setup))
    out.append(_influence(acc, setup))
    return tuple(out)


def _lack_of_fit(setup: _Setup, why: str | None, ssr: float, alpha: float) -> Diagnostic:
    """Agreement with repeats, from the rows grouped by setting as they were read."""
    name = "lack_of_fit"
    if why:
        return _diag(name, False, why, "streamed")
    if not _settings_of(setup.model):
        return _diag(name, False, "There are no predictors, so there are no settings to repeat.", "streamed")
    if setup.pure is None:
        text = (
            f"Not computed: the file was read in chunks and has more than {MAX_SETTINGS:,} distinct predictor "
            "settings, more than a chunked fit keeps to group its rows by setting."
        )
        return _diag(name, False, text, "not computed")
    n, p = setup.n, len(setup.model.terms)
    got = lack_of_fit_outcome(n, p, setup.pure, ssr, math.sqrt(max(float(setup.o.f(setup.solved.yy)), 0.0)))
    if isinstance(got, str):
        return _diag(name, False, got, "streamed")
    stat, pv, nums = got
    return _judged(name, stat, pv, nums, alpha, "streamed")


def _reset(acc: _Second, setup: _Setup, alpha: float) -> Diagnostic:
    name = "curvature"
    assert acc.reset is not None
    df = setup.summary.df_resid
    got = reset_triangle(setup.o, acc.reset.triangle(), len(setup.model.terms), df)
    if got is None:
        why = "too few distinct fitted values" if df > 2 else "too few rows"
        return _diag(name, False, f"The curvature test needs more data than this fit has ({why}).", "streamed")
    stat, pv = got
    return _judged(name, stat, pv, f"RESET F = {num(stat)}, {p_text(pv)}", alpha, "streamed")


def _collinearity(setup: _Setup) -> Diagnostic:
    name = "collinearity"
    model, fit = setup.model, setup.summary
    pred = [j for j, t in enumerate(model.terms) if t != "Intercept"]
    if len(pred) < 2:
        return _diag(name, False, "With fewer than two predictors there is nothing to overlap.", "streamed")
    cond = fit.condition
    if not model.has_intercept or setup.solved.col_ss_centred is None:
        flag = cond > COLLINEAR_CONDITION
        text = f"{WORDING[name][1 if flag else 2]}: the condition number of the scaled design is {num(cond)}."
        return _diag(name, flag, text, "streamed", cond)
    css = setup.o.f(setup.solved.col_ss_centred)
    factors = [float(fit.xtx_inv[j, j]) * float(css[j]) for j in pred]
    named = sorted(zip(factors, (model.terms[j] for j in pred), strict=True), reverse=True)
    high = [f"{t} {num(v)}" for v, t in named if v > VIF_LIMIT]
    vifs = ", ".join(high) if high else f"largest {num(named[0][0])}"
    text = f"{WORDING[name][1 if high else 2]} (variance inflation {vifs}; condition number {num(cond)})."
    return _diag(name, bool(high), text, "streamed", named[0][0])


def _influence(acc: _Second, setup: _Setup) -> Diagnostic:
    name = "influence"
    fit = setup.summary
    if fit.df_resid < 1:
        text = f"With {setup.n} rows for {len(fit.terms)} coefficients every point is fitted exactly."
        return _diag(name, False, text,
                     "streamed")  # fmt: skip
    stat = acc.d_max if acc.d_any else None
    limits = f"largest Cook's distance {num(acc.d_max)}, against the F-median limit {num(setup.cooks_cut)}; "
    limits += f"largest |studentized residual| {num(acc.t_max)}, against the outlier-test limit {num(setup.t_cut)}"

    def points(k: int, verb: str) -> str:
        return f"one point {verb}s" if k == 1 else f"{k} points {verb}"

    parts = []
    if k := acc.one:
        them = "it" if k == 1 else "them"
        parts.append(f"{points(k, 'set')} a coefficient alone (leverage 1), so no other row can check {them}")
    if k := acc.far:
        parts.append(f"{points(k, 'lie')} far from the line through the other rows")
    if k := acc.strong:
        parts.append(f"{points(k, 'move')} the coefficients strongly")
    if not parts:
        return _diag(name, False, f"{WORDING[name][2]} ({limits}).", "streamed", stat)
    text = "; ".join(parts)
    d = _diag(name, True, f"{text[0].upper()}{text[1:]} ({limits}).", "streamed", stat)
    return replace(d, rows=tuple(acc.check_rows))


def _spread(acc: _Second) -> tuple[tuple[float, float, float, float], ...]:
    """:func:`sitegen.derive.spread_bins` from the binned counts of every row."""
    if acc.spread_n == 0:
        return ()
    edges = derive.spread_edges(acc.spread_top)
    fine = _SPREAD_EDGES
    counts = np.zeros(len(edges) - 1)
    for i in range(len(fine) - 1):
        j = int(np.clip(np.searchsorted(edges, fine[i], side="right") - 1, 0, len(counts) - 1))
        counts[j] += acc.spread[i]
    return derive.spread_rows(edges, counts, acc.spread_n)


def _chart(acc: _Second, setup: _Setup, skeleton: Design, first: _First) -> ChartData:
    x_col = setup.x_col
    sampled = setup.n > MAX_CHART_POINTS
    picked = dict(acc.sample)
    for i, pay in acc.chart_flagged.items():
        picked[i] = pay
    order = sorted(picked)
    names = tuple(sorted(c for c in _CHART_COLUMNS if c != "x" or x_col is not None))
    position = {c: _CHART_COLUMNS.index(c) for c in names}
    points = tuple(tuple(_clean(picked[i][position[c]]) for c in names) for i in order)
    band: derive.ChartTable = ((), ())
    if x_col is not None:
        s = first.data[x_col]
        band = derive.band_table(skeleton, x_col, (s.low, s.high), setup.summary, None)
    density: derive.ChartTable = ((), ())
    if sampled and acc.density is not None and setup.density_range is not None:
        (x0, x1), (y0, y1) = setup.density_range
        xe = np.linspace(x0, x1, derive.DENSITY_BINS + 1)
        ye = np.linspace(y0, y1, derive.DENSITY_BINS + 1)
        density = derive.density_table(acc.density, xe, ye)
    y_name = setup.model.plan.y_name
    return derive.chart_data(x_col, y_name, (names, points), band, density, _spread(acc), setup.n)


def _clean(v: float) -> float | None:
    return v if math.isfinite(v) else None


@dataclass(frozen=True, slots=True)
class Outcome:
    """A chunked fit's report, and the files it wrote into the dataset's folder."""

    report: FitReport
    written: tuple[str, ...]


def fit_in_chunks(  # noqa: PLR0917 - one dataset's inputs
    base: FitReport,
    spec: DatasetSpec,
    limits: Limits,
    csv_path: Path,
    root: Path | None,
    folder: Path | None,
    threshold: float,
) -> Outcome:
    """Fit one dataset in chunks (see the module docstring); raises :class:`DatasetError` as the whole-file
    path does. ``folder`` receives ``observations.csv`` (None: it is not written)."""
    name = base.source
    refuse_unsupported(spec, name)
    chunk_rows = max(1, limits.stream_chunk_rows)
    src = Source(csv_path, root, name, spec, limits, chunk_rows)
    out = frozenset(r for r, _ in spec.leave_out)
    o = ops()
    first = _first_pass(src, spec, o, out)
    model = _check_first(first, name)
    assert first.qr is not None
    intercept_first = model.has_intercept and model.terms[0] == "Intercept"
    solved = solve_triangle(o, first.qr.triangle(), model.terms, intercept_first=intercept_first)
    if ext.needs_double_double(solved.condition):  # badly conditioned: read and fit again in double-double
        with ext.forced(ext.DOUBLE_DOUBLE):
            return fit_in_chunks(base, spec, limits, csv_path, root, folder, threshold)
    n, p = first.n, len(model.terms)
    summary = _summary(model, solved, o, n, spec.level, solved.beta_s, solved.ssr)
    skeleton = _skeleton(model, first)
    x_col = derive.single_predictor(skeleton)
    if n > MAX_CHART_POINTS:
        rng = np.random.default_rng(20240611)  # the whole-file path's sample (derive._chart_sample)
        sample = frozenset(int(v) for v in rng.choice(n, size=SAMPLE_POINTS, replace=False).tolist())
    else:
        sample = frozenset(range(n))
    density_range = None
    if x_col is not None:
        sx = first.data[x_col]
        density_range = ((sx.low, sx.high), (first.y.low, first.y.high))
    mean_fitted = o.dot(first.x_sum, summary.beta_ext) / o.of(float(n))
    if model.has_intercept:
        fitted_ss = max(summary.tss - summary.ssr, 0.0)
    else:
        fitted_ss = max(float(o.f(solved.yy)) - summary.ssr, 0.0)
    fitted_scale = math.sqrt(fitted_ss / n)
    t_cut = max(RESIDUAL_LIMIT, dist.t_isf((1 - spec.level) / (2 * n), n - p - 1) if n - p > 1 else 0.0)
    pure = first.repeats.pure_error()
    repeated = first.repeats.repeated_keys()
    setup = _Setup(
        model=model,
        solved=solved,
        summary=summary,
        o=o,
        n=n,
        sample=sample,
        x_col=x_col,
        density_range=density_range,
        cutoffs=(2.0 * p / n, 3.0, 4.0 / n, 2.0 * math.sqrt(p / n)),
        exact=summary.ssr == 0.0,
        mean_fitted=mean_fitted,
        fitted_scale=fitted_scale,
        name=name,
        reading_weight=spec.reading_weight,
        t_cut=t_cut,
        cooks_cut=dist.f_ppf(0.5, p, n - p),
        sha256=first.sha256,
        pure=pure,
        repeated=repeated,
    )
    written: tuple[str, ...] = ()
    if folder is not None:
        folder.mkdir(parents=True, exist_ok=True)
        target = folder / OBSERVATIONS
        try:
            with target.open("wb") as sink:
                second = _second_pass(src, setup, out, sink)
        except BaseException:
            target.unlink(missing_ok=True)
            raise
        written = (OBSERVATIONS,)
    else:
        second = _second_pass(src, setup, out, None)
    beta_s, ssr_ext = refine(o, solved, second.xtr, second.rr)
    refined = _summary(model, solved, o, n, spec.level, beta_s, ssr_ext)
    checks = _checks(second, setup, refined.ssr)
    report = _report(base, spec, first, model, refined, setup, second, checks, skeleton, limits, threshold)
    return Outcome(report, written)


def _report(  # noqa: PLR0917 - the pieces of one report
    base: FitReport,
    spec: DatasetSpec,
    first: _First,
    model: Model,
    fit: OlsFit,
    setup: _Setup,
    second: _Second,
    checks: tuple[Diagnostic, ...],
    skeleton: Design,
    limits: Limits,
    threshold: float,
) -> FitReport:
    from sitegen.analyze import _spec_messages, settled, with_fit  # noqa: PLC0415

    name = base.source
    sidecar = name[: -len(".csv")] + ".toml"
    messages = _spec_messages(spec, sidecar)
    excluded = tuple((r, why) for r, why in spec.leave_out if 1 <= r <= first.rows_read)
    messages += derive.input_messages(
        sidecar=sidecar,
        assumed=first.formula if first.assumed else None,
        notes=first.notes,
        rows_read=first.rows_read,
        missing=sorted(r for r, _ in spec.leave_out if not 1 <= r <= first.rows_read),
        excluded=excluded,
        dropped=first.dropped,
        dropped_total=first.dropped_total,
    )
    mb = first.size / 1e6  # how the file was read is the report's `chunked`, which the page states
    diagnostics = tuple(
        replace(d, basis="all rows" if "Shapiro–Wilk decides" in d.text else "streamed")
        if d.check == "normality"
        else d
        for d in derive.one_normality_check(checks)
    )
    for d in diagnostics:
        if d.flag:
            messages.append(check_warning(d))
    claims = derive.judged_claims(fit, spec, messages)
    predictions = derive._predictions(skeleton, fit, spec, messages, None)
    flagged = tuple(FlaggedPoint(*pay) for _, pay in second.listed.items())
    report = replace(
        with_fit(base, fit, None),
        model=first.formula,
        model_assumed=first.assumed,
        response=model.plan.y_name,
        terms=model.terms,
        variables=model.used,
        n_rows=first.rows_read,
        excluded_rows=excluded,
        dropped_rows=tuple(first.dropped),
        messages=tuple(messages),
        diagnostics=diagnostics,
        flagged=flagged,
        flagged_total=second.flagged_total,
        cutoffs=(
            ("leverage", setup.cutoffs[0]),
            ("studentized_residual", setup.cutoffs[1]),
            ("cooks_distance", setup.cutoffs[2]),
            ("dffits", setup.cutoffs[3]),
        ),
        predictions=predictions,
        claims=tuple(claims),
        chart=_chart(second, setup, skeleton, first),
        reading=first.layout,
        purpose=spec.purpose,
        input_sha256=first.sha256,
        chunked=Chunked(mb, threshold, limits.stream_chunk_rows, first.chunks, 2),
    )
    return settled(report, spec)
