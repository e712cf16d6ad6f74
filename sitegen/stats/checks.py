"""Plain-language checks of whether a fitted OLS line can be trusted.

Each check returns a :class:`Check`: a machine name, a heading, the test
statistic and p-value (``None`` when not applicable), a flag, one sentence
stating the result and, when flagged, one sentence of advice. A check that
cannot be computed (too few rows, a perfect fit, nothing to test) is not
flagged and says why; none raises or warns.

Inputs are on the data's scale, as the solver returns them: the design ``X``
(unweighted), ``y``, ``resid = y − fitted`` and ``fitted``; for a weighted fit
pass ``weights`` and every check works on the weighted scale (rows times √w),
where the model's errors have constant variance.

Tests and rules (``alpha`` is the significance level for every p-value):

Every auxiliary regression (Breusch–Pagan, RESET) goes through the fit's own
solver (:mod:`sitegen.stats.solver`: scaled columns, extended-precision QR,
refined residuals) — or, where that is as accurate as a float64 figure can show
(:func:`_design_q`), is projected on the fit's own extended-precision Q, with the
explained part taken directly rather than as a difference of nearly equal sums —
and the variance inflation factors come from the fit's (X'X)⁻¹ of that
factorisation, never from inverting a correlation matrix.

- constant_variance: Breusch–Pagan in Koenker's studentized form (statsmodels
  ``het_breuschpagan``), squared residuals against a constant and the predictors.
- independence: Durbin–Watson d in row order; one-sided p-value for positive
  autocorrelation (small d: neighbouring rows agree, as with drift or carry-over; the
  classical direction of the test), exact up to
  :data:`sitegen.stats.durbin_watson.EXACT_MAX_ROWS` rows (Imhof's inversion of the
  characteristic function, see that module) and beyond it from a beta distribution
  with d's exact mean and variance (Durbin and Watson's moment-matched approximation),
  which the sentence then says.
- normality_shapiro: Shapiro–Wilk (scipy) for 3 to 5000 rows; normality_jarque_bera:
  Jarque–Bera (scipy), a large-sample test.
- curvature: Ramsey's RESET, an F test for adding the squared and cubed fitted
  values (computed here so that weights are respected).
- lack_of_fit: F test of the model against the means of rows with identical
  predictor values (pure error). Our rule: it is judged only when at least
  ``LOF_MIN_REPEATED`` settings were measured more than once and pure error has at
  least ``LOF_MIN_PURE_DF`` degrees of freedom; with fewer, the pure-error variance
  rests on one or two differences and the test can neither find a misfit nor vouch
  for the line.
- collinearity: variance inflation factors (flag above 10, common practice) with an
  intercept; without one, the condition number of the column-scaled design (flag
  above 30, common practice).
- influence: any Cook's distance above the median of F(p, n − p), any leverage ≈ 1,
  or any |externally studentized residual| above 3 (all common practice) or, when
  larger, above the Bonferroni outlier-test limit t(1 − α/(2n), n − p − 1), so that
  among many rows the few ordinary points beyond 3 (about 1 in 370) raise no flag.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from functools import partial

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.stats import distributions as dist
from sitegen.stats import durbin_watson, ext
from sitegen.stats.influence import LEVERAGE_ONE, Influence
from sitegen.stats.repeats import PureError
from sitegen.stats.rowsqr import RowsQR
from sitegen.stats.shapiro import shapiro_wilk
from sitegen.stats.solver import Ext, Ops, _apply_qt, _check_rank, _householder, kind_of, ops, residual_ss, solve
from sitegen.stats.text import minus, p_text

FloatArray = NDArray[np.float64]

SHAPIRO_MAX_ROWS = 5000
VIF_LIMIT = 10.0
CONDITION_LIMIT = 30.0
RESIDUAL_LIMIT = 3.0
_ZERO = 1e-12  # relative size below which residual scatter counts as zero
_RANK_TOL = 1e-8  # relative size below which a column counts as dependent
#: Above this many rows the auxiliary regressions of Breusch–Pagan and RESET are factored block by block
#: (:mod:`sitegen.stats.rowsqr`, as for a file read in chunks) instead of as one tall matrix, so that their
#: memory stays that of one block; their statistics then come from the new columns' effects directly.
BLOCKS_ABOVE_ROWS = 250_000
BLOCK_ROWS = 65_536

#: name: (heading, sentence when flagged, sentence when not, advice when flagged)
WORDING: dict[str, tuple[str, str, str, str]] = {
    "constant_variance": (
        "Even scatter",
        "The scatter of the residuals changes with the predictors",
        "The scatter of the residuals shows no clear change with the predictors",
        "Intervals assume an even scatter: consider weights, a transformation of y such as a log, "
        "or standard errors that allow for uneven scatter.",
    ),
    "independence": (
        "Neighbouring rows",
        "Residuals of neighbouring rows are correlated",
        "Residuals of neighbouring rows look unrelated",
        "If the rows are in time or run order, look for drift or carry-over and consider a term for it; "
        "if the row order means nothing, this check can be ignored.",
    ),
    "normality_shapiro": (
        "Bell-shaped residuals (Shapiro–Wilk)",
        "The residuals depart from a bell-shaped (normal) distribution",
        "The residuals are consistent with a bell-shaped (normal) distribution",
        "Look at the chart of the residuals' shape against a bell: skewed or heavy-tailed residuals make "
        "intervals and p-values less reliable, especially with few rows, and may point to outlying rows or a "
        "need to transform y.",
    ),
    "curvature": (
        "Straightness",
        "Squared and cubed fitted values improve the fit, so the relation bends",
        "Squared and cubed fitted values do not improve the fit",
        "Plot the residuals against each predictor; a curved term such as I(x**2), a transformation "
        "or a narrower range may describe the data better.",
    ),
    "lack_of_fit": (
        "Agreement with repeat measurements",
        "The line misses the averages of repeated measurements by more than their scatter explains",
        "The line agrees with the averages of repeated measurements within their scatter",
        "The model's shape is too simple for these data: try a curved term or a transformation, "
        "and look at the settings the line misses most.",
    ),
    "collinearity": (
        "Overlapping predictors",
        "Predictors overlap strongly",
        "Predictors overlap little",
        "The separate coefficients are unstable even if the line itself is fine: drop or combine "
        "overlapping predictors, or centre a predictor before taking its powers.",
    ),
    "influence": (
        "Points that steer the line",
        "",
        "No single point steers the line",
        "Check these rows for recording errors and refit without them to see how much the line "
        "depends on them; add measurements near any setting that a single point decides.",
    ),
}
WORDING["normality_jarque_bera"] = ("Bell-shaped residuals (Jarque–Bera)", *WORDING["normality_shapiro"][1:])


@dataclass(frozen=True, slots=True)
class Check:
    """The outcome of one model check, in plain words."""

    check: str  # stable machine name
    label: str  # short heading
    statistic: float | None
    p_value: float | None
    flag: bool
    text: str  # one sentence stating the result
    advice: str  # one sentence on what to do when flagged, else ""
    rows: tuple[int, ...] = ()  # 0-based indices of the rows concerned


@dataclass(frozen=True, slots=True)
class _Data:
    X: FloatArray  # design, data scale
    s: FloatArray  # √weights (ones without weights)
    yw: FloatArray  # response, weighted scale
    ew: FloatArray  # residuals, weighted scale
    fitted: FloatArray  # fitted values, data scale
    q: FloatArray  # thin QR factors of the weighted design
    r: FloatArray
    icol: int | None  # index of the intercept column
    terms: tuple[str, ...]
    n: int
    p: int
    df: int
    ssr: float
    why_not: str | None  # why the residuals cannot be judged, if they cannot
    ext: Precise
    s_ext: Ext  # √weights, extended
    ew_ext: Ext  # residuals, weighted scale, extended
    weighted: bool


@dataclass(frozen=True, slots=True)
class Precise:
    """The fit's extended-precision pieces the checks build on (all from the main solver)."""

    X_ext: Ext  # design, data scale (unweighted), extended
    resid_ext: Ext  # y − fitted, data scale, extended
    fitted_ext: Ext
    q: FloatArray  # thin Q of the weighted design, from the extended factorisation
    xtx_inv: FloatArray  # (X'WX)⁻¹ from the extended factorisation (NaN when not available)
    condition: float  # condition number of the weighted design with unit-length columns
    q_ext: Ext = None  # thin Q of the weighted design in extended precision, when the solver kept it


def precise_inputs(  # noqa: PLR0917 - the fit's arrays
    X: FloatArray,
    y: FloatArray,
    resid: FloatArray,
    fitted: FloatArray,
    terms: Sequence[str],
    weights: FloatArray | None,
) -> Precise:
    """The pieces of :class:`Precise` for a fit given only in float64 (solved here by the same solver)."""
    o = ops()
    n, p = np.shape(X)
    Xe = o.of(np.asarray(X, dtype=np.float64))
    s = o.of(np.ones(n) if weights is None else np.sqrt(np.asarray(weights, dtype=np.float64)))
    try:
        sol = solve(Xe * s[:, None], o.of(np.asarray(y, dtype=np.float64)) * s, tuple(terms))
        q, xtx_inv, cond, q_ext = sol.q, sol.xtx_inv, sol.condition, sol.q_ext
    except FitError:
        Xw = np.asarray(X, dtype=np.float64) * o.f(s)[:, None]
        q = np.linalg.qr(Xw)[0] if n and p else np.zeros((n, p))
        xtx_inv, cond, q_ext = np.full((p, p), np.nan), math.inf, None
    return Precise(
        Xe,
        o.of(np.asarray(resid, dtype=np.float64)),
        o.of(np.asarray(fitted, dtype=np.float64)),
        q,
        xtx_inv,
        cond,
        q_ext,
    )


#: A test's outcome: (statistic, p-value, the numbers for the sentence), or why it was not computed.
_Outcome = tuple[float, float, str] | str


def _num(v: float) -> str:
    if math.isnan(v):
        return "undefined"
    if math.isinf(v):
        return "infinite" if v > 0 else "minus infinity"
    if abs(v) < 1e-9:
        return "0"
    if abs(v) >= 1000:
        return minus(f"{v:,.0f}")
    return minus(f"{v:.1e}" if abs(v) < 0.001 else f"{v:.3g}")


def _p(p: float) -> str:
    return p_text(p)


def _check(
    name: str,
    flag: bool,
    text: str,
    stat: float | None = None,
    *,
    p: float | None = None,
    rows: tuple[int, ...] = (),
) -> Check:
    label, _, _, advice = WORDING[name]
    return Check(name, label, stat, p, flag, text, advice if flag else "", rows)


def _judge(name: str, outcome: _Outcome, alpha: float) -> Check:
    if isinstance(outcome, str):
        return _check(name, False, outcome)
    stat, p, nums = outcome
    flag = p < alpha
    sentence = WORDING[name][1 if flag else 2]
    return _check(name, flag, f"{sentence} ({nums}).", stat, p=p)


def _predictors(d: _Data) -> list[int]:
    return [j for j in range(d.p) if j != d.icol]


def _prepare(
    X: FloatArray,
    y: FloatArray,
    resid: FloatArray,
    fitted: FloatArray,
    *,
    terms: Sequence[str],
    has_intercept: bool,
    weights: FloatArray | None,
    precise: Precise | None = None,
) -> _Data:
    X = np.asarray(X, dtype=np.float64)
    y, e, f = (np.asarray(a, dtype=np.float64) for a in (y, resid, fitted))
    n, p = X.shape
    if len(terms) != p or not y.shape == e.shape == f.shape == (n,):
        raise ValueError(f"shapes do not match: X {X.shape}, {len(terms)} terms, y {y.shape}")
    pre = precise if precise is not None else precise_inputs(X, y, e, f, terms=terms, weights=weights)
    o = ops()
    if weights is None:
        # Unweighted, √w is one in every row: read-only ones that take no memory per row, and the weighted
        # residuals and response are the plain ones (a product by one is exact).
        s: FloatArray = np.broadcast_to(np.float64(1.0), (n,))
        s_ext = o.of(np.ones(n)) if o.dd else np.broadcast_to(np.longdouble(1.0), (n,))
        ew_ext = pre.resid_ext * s_ext if o.dd else pre.resid_ext
        yw = y
    else:
        s = np.sqrt(np.asarray(weights, dtype=np.float64))
        s_ext = o.sqrt(o.of(np.asarray(weights, dtype=np.float64)))
        ew_ext = pre.resid_ext * s_ext
        yw = y * s
    q = pre.q
    icol = None
    if has_intercept and n > 0:
        consts = [j for j in range(p) if X[0, j] != 0 and np.all(X[:, j] == X[0, j])]
        icol = list(terms).index("Intercept") if "Intercept" in terms else (consts[0] if consts else None)
    ew = o.f(ew_ext)
    ssr = float(o.f(o.dot(ew_ext, ew_ext)))
    why = None
    if n <= p:
        why = f"With {n} rows for {p} coefficients nothing is left over to judge the residuals."
    elif not math.isfinite(ssr):
        why = "Some residuals are not finite numbers, so they cannot be judged."
    elif math.sqrt(ssr) <= _ZERO * float(np.linalg.norm(yw)):
        why = "The model passes through every point, so there is no scatter to examine."
    r = np.zeros((p, p))  # not used: the condition number comes from the solver
    return _Data(
        X, s, yw, ew, f, q, r, icol, tuple(terms), n, p, n - p, ssr, why, pre, s_ext, ew_ext, weights is not None
    )


def _independent_columns(Z: FloatArray) -> NDArray[np.bool_]:
    """Which columns do not (nearly) repeat earlier ones."""
    norms = np.linalg.norm(Z, axis=0)
    diag = np.abs(np.diag(np.linalg.qr(Z / np.where(norms > 0, norms, 1.0), mode="r")))
    return np.asarray(diag > _RANK_TOL)


def _constant_variance(d: _Data) -> _Outcome:
    o = ops()
    pred = _predictors(d)
    if not pred:
        return "There is no predictor for the scatter to change with."
    if np.ptp(d.ew**2) == 0:
        return "All residuals have the same size, so their scatter cannot change."
    if d.n > BLOCKS_ABOVE_ROWS:
        return _constant_variance_in_blocks(d, pred)
    q = _design_q(o, d)
    if q is not None and d.icol is not None and not d.weighted:
        # The constant and the predictors span the design's own columns: e² is projected on the fit's Q.
        lm, p = _breusch_pagan_on_design(o, d.ew_ext, q)
        if not (math.isfinite(lm) and math.isfinite(p)):
            return "The Breusch–Pagan test gave no usable result for these data."
        return lm, p, f"Breusch–Pagan LM = {_num(lm)}, {_p(p)}"
    cols = [o.of(np.ones(d.n)), *(d.ext.X_ext[:, j] for j in pred)]
    try:
        lm, p = _breusch_pagan(d.ew_ext, list(cols))
    except FitError:
        # exactly dependent predictors (possible without an intercept): keep the independent ones
        Z = np.column_stack([np.ones(d.n), d.X[:, pred]])
        keep = np.flatnonzero(_independent_columns(Z))
        if keep.size < 2:
            return "There is no predictor for the scatter to change with."
        try:
            lm, p = _breusch_pagan(d.ew_ext, [cols[int(k)] for k in keep])
        except FitError as exc:
            return f"The Breusch–Pagan test could not be computed ({exc.message})."
    if not (math.isfinite(lm) and math.isfinite(p)):
        return "The Breusch–Pagan test gave no usable result for these data."
    return lm, p, f"Breusch–Pagan LM = {_num(lm)}, {_p(p)}"


def _breusch_pagan(e: Ext, cols: list[Ext]) -> tuple[float, float]:
    """Koenker's studentized Breusch–Pagan LM = n·R² of e² on Z, χ² on (columns − 1) df.

    The same statistic as statsmodels' ``het_breuschpagan`` (robust form), which the
    tests use as a reference; the regression of e² on Z is solved by the fit's own
    solver in extended precision. Raises FitError when Z is rank-deficient.
    """
    o = ops()
    u = e * e
    n = len(u)
    k = len(cols)
    ssr = residual_ss(_stacked(o, cols), u, tuple(f"z{j}" for j in range(k)))
    dev = u - o.dot(u, o.of(np.ones(n))) / n
    tss = float(o.f(o.dot(dev, dev)))
    r2 = 1 - ssr / tss if tss > 0 else 0.0
    lm = n * r2
    return lm, dist.chi2_sf(lm, k - 1)


def _design_q(o: Ops, d: _Data) -> Ext:
    """The fit's extended-precision thin Q, where projecting on it is as accurate as a float64 figure can show;
    else None (the auxiliary regression is then solved again, with refinement).

    A Householder Q spans the columns of a design within about cond · ε of the arithmetic (backward stability,
    common practice): below float64's unit roundoff when cond · ε ≤ 2⁻⁵³ — every design in double-double, and
    in long double designs up to a condition number of 2¹¹ (straight lines on most data; not the NIST
    polynomials, which keep the refined route).
    """
    if d.ext.q_ext is None or not d.ext.condition * o.eps <= 2.0**-53:
        return None
    return d.ext.q_ext


def _breusch_pagan_on_design(o: Ops, e: Ext, q: Ext) -> tuple[float, float]:
    """Koenker's LM when the constant and the predictors span the columns of the fit's design, whose thin Q
    (extended precision, from the fit's factorisation) is ``q``: R² is ‖Q'(u − ū)‖² / ‖u − ū‖², u = e², the
    explained part taken directly (no difference of nearly equal sums), with no second factorisation."""
    u = e * e
    n, k = q.shape
    dev = u - o.dot(u, o.of(np.ones(n))) / n
    effects = o.dot(q.T, dev)
    explained = float(o.f(o.dot(effects, effects)))
    tss = float(o.f(o.dot(dev, dev)))
    lm = n * (explained / tss if tss > 0 else 0.0)
    return lm, dist.chi2_sf(lm, k - 1)


def breusch_pagan_triangle(o: Ops, T: Ext, n: int, terms: tuple[str, ...]) -> tuple[float, float]:
    """Koenker's LM from the R factor ``T`` of [Z | e²], Z's first column the constant.

    R² is the predictors' effects over the centred total sum of squares (the entries of the last column
    below the first), so no difference of nearly equal sums is formed. Raises FitError when Z is
    rank-deficient.
    """
    k = len(terms)
    _check_rank(o, T[:k, :k], terms)
    explained = float(o.f(o.dot(T[1:k, k], T[1:k, k])))
    tss = float(o.f(o.dot(T[1:, k], T[1:, k])))
    lm = n * (explained / tss if tss > 0 else 0.0)
    return lm, dist.chi2_sf(lm, k - 1)


def reset_triangle(o: Ops, T: Ext, p: int, df: int) -> tuple[float, float] | None:
    """RESET's F and p-value from the R factor ``T`` of [X | z² | z³ | y] (X with ``p`` columns).

    Both powers are tried first, then each alone (the one the design already holds is dropped); the new
    columns' effects give the explained part directly. None when neither power adds to the design or too
    few rows are left.
    """
    for k, cols in ((2, [*range(p), p, p + 1]), (1, [*range(p), p]), (1, [*range(p), p + 1])):
        R = _householder(o, T[:, [*cols, p + 2]].copy())[0]
        try:
            _check_rank(o, R[: len(cols), : len(cols)], tuple(f"c{j}" for j in cols))
        except FitError:
            continue
        if df - k < 1:
            return None
        c = len(cols)
        rest = max(float(o.f(R[c, c] * R[c, c])), 0.0)
        extra = float(o.f(o.dot(R[p:c, c], R[p:c, c])))  # the new columns' effects: no cancellation
        stat = math.inf if rest == 0 else (extra / k) / (rest / (df - k))
        return stat, 0.0 if rest == 0 else dist.f_sf(stat, k, df - k)
    return None


def _in_blocks(o: Ops, n: int, width: int, block: Callable[[int, int], list[Ext]]) -> Ext:
    """The R factor of the matrix whose rows ``block(lo, hi)`` gives as columns, BLOCK_ROWS rows at a time."""
    acc = RowsQR(o, width)
    for lo in range(0, n, BLOCK_ROWS):
        acc.add(o.columns(block(lo, min(n, lo + BLOCK_ROWS))))
    return acc.triangle()


def _constant_variance_in_blocks(d: _Data, pred: list[int]) -> _Outcome:
    """Breusch–Pagan for a long fit: e² on the constant and predictors, factored block by block."""
    o = ops()
    k = 1 + len(pred)

    def block(lo: int, hi: int) -> list[Ext]:
        e = d.ew_ext[lo:hi]
        return [o.of(np.ones(hi - lo)), *(d.ext.X_ext[lo:hi, j] for j in pred), e * e]

    T = _in_blocks(o, d.n, k + 1, block)
    terms = tuple(f"z{j}" for j in range(k))
    try:
        lm, p = breusch_pagan_triangle(o, T, d.n, terms)
    except FitError:
        # exactly dependent predictors (possible without an intercept): keep the independent ones
        keep = [int(j) for j in np.flatnonzero(_independent_columns(o.f(T[:k, :k])))]
        if len(keep) < 2 or keep[0] != 0:
            return "There is no predictor for the scatter to change with."
        try:
            sub = _householder(o, T[:, [*keep, k]].copy())[0]
            lm, p = breusch_pagan_triangle(o, sub, d.n, tuple(terms[j] for j in keep))
        except FitError as exc:
            return f"The Breusch–Pagan test could not be computed ({exc.message})."
    if not (math.isfinite(lm) and math.isfinite(p)):
        return "The Breusch–Pagan test gave no usable result for these data."
    return lm, p, f"Breusch–Pagan LM = {_num(lm)}, {_p(p)}"


def _curvature_in_blocks(d: _Data, mean: Ext, scale: float) -> _Outcome:
    """RESET for a long fit: [X | z² | z³ | y] on the weighted scale, factored block by block."""
    o = ops()

    def block(lo: int, hi: int) -> list[Ext]:
        s = d.s_ext[lo:hi]
        fe = d.ext.fitted_ext[lo:hi]
        z = (fe - mean) / scale
        y = (fe + d.ext.resid_ext[lo:hi]) * s
        return [*(d.ext.X_ext[lo:hi, j] * s for j in range(d.p)), s * z * z, s * z * z * z, y]

    T = _in_blocks(o, d.n, d.p + 3, block)
    got = reset_triangle(o, T, d.p, d.df)
    if got is None:
        why = "too few distinct fitted values" if d.df > 2 else "too few rows"
        return f"The curvature test needs more data than this fit has ({why})."
    stat, p = got
    return stat, p, f"RESET F = {_num(stat)}, {_p(p)}"


def _stacked(o: Ops, cols: list[Ext]) -> Ext:
    """The columns as one matrix, emptying ``cols`` as they are copied in (each is freed once placed)."""
    out = o.columns(cols)
    cols.clear()
    return out


def dw_moments(q: FloatArray, df_resid: int) -> tuple[float, float]:
    """Exact mean and variance of the Durbin–Watson d under independent normal errors.

    ``q`` is the thin Q factor of the design. With A the first-difference
    matrix D'D and M = I − QQ', d = e'Ae / e'e has mean tr(MA)/ν and variance
    2(ν tr((MA)²) − tr(MA)²) / (ν²(ν + 2)), ν = n − p; the traces take O(n p²).
    """
    n = q.shape[0]
    dq = np.diff(q, axis=0)  # DQ
    b = dq.T @ dq  # Q'AQ
    aq = np.zeros_like(q)  # AQ = D'(DQ)
    aq[1:] += dq
    aq[:-1] -= dq
    return dw_moments_from(n, b, float(np.sum(aq * aq)), df_resid)


def dw_moments_from(n: int, dq_gram: FloatArray, aq_squared: float, df_resid: int) -> tuple[float, float]:
    """:func:`dw_moments` from its sums (for rows read whole or in chunks): ``dq_gram`` = Q'AQ = (DQ)'(DQ)
    and ``aq_squared`` = the sum of the squares of AQ."""
    tr1 = 2.0 * (n - 1) - float(np.trace(dq_gram))
    tr2 = 6.0 * n - 8.0 - 2.0 * aq_squared + float(np.sum(dq_gram * dq_gram))
    nu = float(df_resid)
    return tr1 / nu, 2.0 * (nu * tr2 - tr1**2) / (nu**2 * (nu + 2.0))


def dw_beta_p(dw: float, mean: float, var: float) -> float:
    """P(d ≤ dw) by Durbin and Watson's beta approximation: d/4 as a beta variable with d's exact mean and
    variance (NaN when no beta distribution has them)."""
    m, v = mean / 4.0, var / 16.0
    if not (0 < m < 1 and 0 < v < m * (1 - m)):
        return math.nan
    a, b = m * (m * (1 - m) / v - 1), (1 - m) * (m * (1 - m) / v - 1)
    return min(1.0, dist.beta_cdf(dw / 4, a, b))


def dw_outcome(dw: float, lag1: float, p: float, *, approximate: bool) -> _Outcome:
    """The Durbin–Watson check's figures and wording (for rows read whole or in chunks); ``approximate``: the
    p-value is :func:`dw_beta_p`'s."""
    if not math.isfinite(p):
        return f"Durbin–Watson d = {_num(dw)}, but no p-value can be given for this design."
    how = ""
    if approximate:
        how = (
            f"; above {durbin_watson.EXACT_MAX_ROWS:,} rows the p-value is approximate "
            "(a beta distribution with d's exact mean and variance)"
        )
    note = "; residuals alternate in sign, which is not flagged" if dw > 2 and p > 0.5 else ""
    return dw, p, f"Durbin–Watson d = {_num(dw)}, lag-one correlation {_num(lag1)}, {_p(p)}{how}{note}"


def _independence(d: _Data) -> _Outcome:
    if d.df < 2:
        return "Too few rows are left over to judge neighbouring residuals."
    dw = float(np.sum(np.diff(d.ew) ** 2)) / d.ssr
    lag1 = float(d.ew[1:] @ d.ew[:-1]) / d.ssr
    if d.n <= durbin_watson.EXACT_MAX_ROWS:
        # One-sided, as the classical test: small d means neighbours agree (positive autocorrelation),
        # the pattern of drift and carry-over. Rows in arbitrary order often alternate by chance.
        # An intercept without weights puts the constant itself in the design's span (the cheaper route).
        p = durbin_watson.exact_cdf(dw, d.q, constant_in_span=d.icol is not None and not d.weighted)
    else:
        p = dw_beta_p(dw, *dw_moments(d.q, d.df))
    return dw_outcome(dw, lag1, p, approximate=d.n > durbin_watson.EXACT_MAX_ROWS)


def _jarque_bera(e: FloatArray) -> tuple[float, float]:
    """Jarque–Bera JB = n/6 (S² + (K − 3)²/4) from the biased moments, χ² on 2 df (as scipy.stats.jarque_bera)."""
    z = e - e.mean()
    z = z / float(np.max(np.abs(z)))  # scale-free: the third and fourth powers of residuals near 1e80 overflow
    m2 = float(np.mean(z**2))
    skew = float(np.mean(z**3)) / m2**1.5
    kurt = float(np.mean(z**4)) / m2**2
    jb = len(e) / 6 * (skew**2 + (kurt - 3) ** 2 / 4)
    return jb, dist.chi2_sf(jb, 2)


def _normality(d: _Data, shapiro: bool) -> _Outcome:
    if np.ptp(d.ew) == 0:
        return "All residuals are equal, so they have no shape to judge."
    if not shapiro:
        stat, p = _jarque_bera(d.ew)
        return stat, p, f"Jarque–Bera = {_num(stat)}, {_p(p)}; a large-sample test"
    if not 3 <= d.n <= SHAPIRO_MAX_ROWS:
        return f"Shapiro–Wilk is computed for 3 to {SHAPIRO_MAX_ROWS:,} rows only, not {d.n:,}."
    stat, p = shapiro_wilk(d.ew)
    return stat, p, f"Shapiro–Wilk W = {stat:.3f}, {_p(p)}"


def _curvature(d: _Data) -> _Outcome:
    o = ops()
    fe = d.ext.fitted_ext
    ze = fe - o.dot(fe, o.of(np.ones(d.n))) / d.n if d.icol is not None else fe.copy()
    z = o.f(ze)
    scale = float(np.max(np.abs(z)))
    if scale <= _ZERO * float(np.max(np.abs(d.fitted))):
        return "The fitted values are all equal, so there is no bend to look for."
    if d.n > BLOCKS_ABOVE_ROWS:
        del ze, z
        mean = o.dot(fe, o.of(np.ones(d.n))) / d.n if d.icol is not None else o.of(np.zeros(1))
        return _curvature_in_blocks(d, mean, scale)
    ze = ze / scale  # powers of the centred, scaled fitted values span the same space with the design
    new = [d.s_ext * ze * ze, d.s_ext * ze * ze * ze]
    del ze, z
    # How many of the two new columns are new to the design (a rank decision, so float64 will do).
    A = np.column_stack([o.f(c) for c in new])
    W = A - d.q @ (d.q.T @ A)
    W -= d.q @ (d.q.T @ W)  # second pass for accuracy
    W /= np.linalg.norm(A, axis=0)
    del A
    sv = np.linalg.svd(W, compute_uv=False)
    k = int(np.sum(sv > _RANK_TOL))
    if k == 0 or d.df - k < 1:
        why = "too few distinct fitted values" if k == 0 else "too few rows"
        return f"The curvature test needs more data than this fit has ({why})."
    # What is left of the new columns once the design is taken off, as a share of them (the least over
    # the directions kept): the projection on the fit's Q cancels that much, the refined route does not.
    left = float(sv[1]) if k == 2 else float(np.max(np.linalg.norm(W, axis=0)))
    if k == 1:  # keep the power that adds more
        new = [new[int(np.argmax(np.linalg.norm(W, axis=0)))]]
    del W
    q = _design_q(o, d)
    if q is not None and o.eps <= left * 2.0**-53:
        got = _reset_on_design(o, q, new, d.ew_ext)
        if got is None:
            return "The curvature test needs more data than this fit has (too few distinct fitted values)."
        extra, rest = got
        stat = math.inf if rest == 0 else (extra / k) / (rest / (d.df - k))
        p = 0.0 if rest == 0 else dist.f_sf(stat, k, d.df - k)
        return stat, p, f"RESET F = {_num(stat)}, {_p(p)}"
    yw = (d.ext.fitted_ext + d.ext.resid_ext) * d.s_ext
    # The augmented design is handed over without a name here, so that the solver can free it once scaled
    # (column j times s equals column j of X·diag(s), element by element).
    cols = [*(d.ext.X_ext[:, j] * d.s_ext for j in range(d.p)), *new]
    del new
    try:
        rest = residual_ss(_stacked(o, cols), yw, (*d.terms, *("z²", "z³")[:k]))
    except FitError:
        return "The curvature test needs more data than this fit has (too few distinct fitted values)."
    extra = max(d.ssr - rest, 0.0)
    rest = max(rest, 0.0)
    stat = math.inf if rest == 0 else (extra / k) / (rest / (d.df - k))
    p = 0.0 if rest == 0 else dist.f_sf(stat, k, d.df - k)
    return stat, p, f"RESET F = {_num(stat)}, {_p(p)}"


def _reset_on_design(o: Ops, q: Ext, new: list[Ext], e: Ext) -> tuple[float, float] | None:
    """RESET's explained and residual sums of squares from the fit's own thin Q (extended precision): the new
    columns A are taken off the design's span (A − QQ'A, twice, in extended precision), factored, and the fit's
    residuals ``e`` split by that factor into the part the new columns explain and the rest — both sums of
    squares of their own components, so neither is a difference of nearly equal sums. None when the new columns
    are dependent once the design is taken off."""
    A = o.columns(new)
    for _ in range(2):  # the second pass takes off what rounding left of the design's span (common practice)
        A = A - o.dot(q, o.dot(q.T, A))
    k = A.shape[1]
    R, reflectors = _householder(o, A)
    try:
        _check_rank(o, R, tuple(f"z{j}" for j in range(k)))
    except FitError:
        return None
    split = _apply_qt(o, reflectors, e)
    extra = float(o.f(o.dot(split[:k], split[:k])))
    rest = float(o.f(o.dot(split[k:], split[k:])))
    return extra, rest


LOF_MIN_REPEATED = 2  # settings measured more than once
LOF_MIN_PURE_DF = 3  # degrees of freedom of pure error


def _lack_of_fit(d: _Data) -> _Outcome:
    pred = d.X[:, _predictors(d)]
    if pred.shape[1] == 0:
        return "There are no predictors, so there are no settings to repeat."
    order = np.lexsort(pred.T[::-1])
    step = np.any(np.diff(pred[order], axis=0) != 0, axis=1)
    del pred
    groups = np.empty(d.n, dtype=np.intp)
    groups[order] = np.concatenate([[0], np.cumsum(step)])
    del order, step
    m = int(groups.max()) + 1
    counts = np.bincount(groups, minlength=m)
    if d.n - m < 1 or m - d.p < 1:
        return lack_of_fit_outcome(d.n, d.p, PureError(m, int(np.sum(counts > 1)), 0.0), d.ssr, 1.0)
    means = np.bincount(groups, d.s * d.yw, m) / np.bincount(groups, d.s * d.s, m)
    dev = d.yw - d.s * means[groups]
    pure = PureError(m, int(np.sum(counts > 1)), float(dev @ dev))
    return lack_of_fit_outcome(d.n, d.p, pure, d.ssr, float(np.linalg.norm(d.yw)))


def lack_of_fit_outcome(n: int, p: int, pure: PureError, ssr: float, y_norm: float) -> _Outcome:
    """The lack-of-fit F test from the rows grouped by setting (``y_norm``: ‖y‖ on the fit's scale), for a
    file read whole or in chunks."""
    m = pure.settings
    df_pe, df_lof = n - m, m - p
    if df_pe < 1:
        return "No predictor setting is repeated, so there is no pure error to compare with."
    if df_lof < 1:
        return f"The model has as many coefficients as distinct settings ({m}), so there is nothing to test."
    repeated = pure.repeated
    if repeated < LOF_MIN_REPEATED or df_pe < LOF_MIN_PURE_DF:
        return (
            f"Too few repeated measurements to judge: {repeated} setting{'s' if repeated != 1 else ''} measured "
            f"more than once, {df_pe} degree{'s' if df_pe != 1 else ''} of freedom of pure error; the test needs "
            f"at least {LOF_MIN_REPEATED} repeated settings and {LOF_MIN_PURE_DF} degrees of freedom."
        )
    ss_pe = pure.ss
    if math.sqrt(ss_pe) <= _ZERO * y_norm:
        return "Repeated measurements agree exactly, so there is no pure error to compare with."
    stat = (max(ssr - ss_pe, 0.0) / df_lof) / (ss_pe / df_pe)
    pv = dist.f_sf(stat, df_lof, df_pe)
    return stat, pv, f"lack-of-fit F = {_num(stat)}, {_p(pv)}, {m} distinct settings"


def vif(
    X: FloatArray,
    intercept: int,
    weights: FloatArray | None = None,
    *,
    xtx_inv: FloatArray | None = None,
    X_ext: Ext = None,
) -> FloatArray:
    """Variance inflation factor of every column but the intercept, in column order.

    VIF_j = 1 / (1 − R_j²), the diagonal of the inverse correlation matrix of the
    predictors after the intercept is taken out (weighted when weights are given).
    Computed in a well-conditioned form: by the partitioned inverse, the block of
    (X'WX)⁻¹ that belongs to the predictors is the inverse of their centred cross
    products, so VIF_j = [(X'WX)⁻¹]_jj · Σ w (x_j − x̄_j)², with (X'WX)⁻¹ from the
    solver's extended-precision factorisation (``xtx_inv`` when the fit has it) and
    the centred sums of squares in extended precision. Inverting the correlation
    matrix in float64 instead loses cond² · ε (NIST Filip: cond² near 1e19).
    """
    o = ops()
    n, p = np.shape(X)
    Xe = o.of(np.asarray(X, dtype=np.float64)) if X_ext is None else o.of(X_ext)
    s = o.of(np.ones(n)) if weights is None else o.sqrt(o.of(np.asarray(weights, dtype=np.float64)))
    Xw = Xe * s[:, None]
    if xtx_inv is None:
        try:
            xtx_inv = solve(Xw, o.of(np.zeros(n)), tuple(f"x{j}" for j in range(p))).xtx_inv
        except FitError:
            return np.full(p - 1, np.inf)
    c = Xw[:, intercept]
    cc = o.dot(c, c)
    out = []
    for j in range(p):
        if j == intercept:
            continue
        zj = Xw[:, j]
        dev = zj - c * (o.dot(c, zj) / cc)
        out.append(float(xtx_inv[j, j]) * float(o.f(o.dot(dev, dev))))
    return np.asarray(out, dtype=np.float64)


def _collinearity(d: _Data, weights: FloatArray | None) -> Check:
    name = "collinearity"
    pred = _predictors(d)
    if len(pred) < 2:
        return _check(name, False, "With fewer than two predictors there is nothing to overlap.")
    cond = d.ext.condition
    if d.icol is None:
        flag = cond > CONDITION_LIMIT
        text = f"{WORDING[name][1 if flag else 2]}: the condition number of the scaled design is {_num(cond)}."
        return _check(name, flag, text, cond)
    xtx_inv = None if not bool(np.all(np.isfinite(d.ext.xtx_inv))) else d.ext.xtx_inv
    factors = vif(d.X, d.icol, weights, xtx_inv=xtx_inv, X_ext=d.ext.X_ext)
    named = sorted(zip(factors.tolist(), (d.terms[j] for j in pred), strict=True), reverse=True)
    high = [f"{t} {_num(v)}" for v, t in named if v > VIF_LIMIT]
    vifs = ", ".join(high) if high else f"largest {_num(named[0][0])}"
    text = f"{WORDING[name][1 if high else 2]} (variance inflation {vifs}; condition number {_num(cond)})."
    return _check(name, bool(high), text, named[0][0])


def _points(k: int, verb: str) -> str:
    return f"one point {verb}s" if k == 1 else f"{k} points {verb}"


def _influence(d: _Data, infl: Influence, alpha: float) -> Check:
    name = "influence"
    if len(infl.leverage) != d.n:
        raise ValueError(f"influence has {len(infl.leverage)} rows, the data {d.n}")
    if d.df < 1:
        return _check(name, False, f"With {d.n} rows for {d.p} coefficients every point is fitted exactly.")
    h, t, cooks = (
        np.asarray(a, dtype=np.float64) for a in (infl.leverage, infl.studentized_residual, infl.cooks_distance)
    )
    cut = dist.f_ppf(0.5, d.p, d.df)
    t_cut = max(RESIDUAL_LIMIT, dist.t_isf(alpha / (2 * d.n), d.df - 1) if d.df > 1 else 0.0)
    one, far, strong = h > LEVERAGE_ONE, np.abs(t) > t_cut, cooks > cut
    t_max = float(np.max(np.abs(t), where=~np.isnan(t), initial=0.0))
    d_max = float(np.max(cooks, where=np.isfinite(cooks), initial=0.0))
    stat = d_max if np.any(np.isfinite(cooks)) else None
    limits = f"largest Cook's distance {_num(d_max)}, against the F-median limit {_num(cut)}; "
    limits += f"largest |studentized residual| {_num(t_max)}, against the outlier-test limit {_num(t_cut)}"
    parts = []
    if k := int(one.sum()):
        them = "it" if k == 1 else "them"
        parts.append(f"{_points(k, 'set')} a coefficient alone (leverage 1), so no other row can check {them}")
    if k := int(far.sum()):
        parts.append(f"{_points(k, 'lie')} far from the line through the other rows")
    if k := int(strong.sum()):
        parts.append(f"{_points(k, 'move')} the coefficients strongly")
    if not parts:
        return _check(name, False, f"{WORDING[name][2]} ({limits}).", stat)
    text = "; ".join(parts)
    rows = tuple(np.flatnonzero(one | far | strong).tolist())
    return _check(name, True, f"{text[0].upper()}{text[1:]} ({limits}).", stat, rows=rows)


def model_checks(
    X: FloatArray,
    y: FloatArray,
    resid: FloatArray,
    fitted: FloatArray,
    *,
    terms: Sequence[str],
    has_intercept: bool,
    infl: Influence,
    alpha: float,
    weights: FloatArray | None = None,
    precise: Precise | None = None,
) -> tuple[Check, ...]:
    """Run every check on one fit, in a fixed order (see the module docstring).

    ``terms`` names the columns of ``X``; the intercept column is the one named
    ``Intercept`` or else a constant column. Raises ``ValueError`` only on
    mismatched shapes, a programming error. ``precise`` carries the fit's own
    extended-precision pieces; without it they are computed here by the same solver.
    """
    if precise is not None and kind_of(precise.X_ext) != ext.current():
        with ext.forced(kind_of(precise.X_ext)):  # the checks work in the fit's own arithmetic
            return model_checks(
                X,
                y,
                resid,
                fitted,
                terms=terms,
                has_intercept=has_intercept,
                infl=infl,
                alpha=alpha,
                weights=weights,
                precise=precise,
            )
    d = _prepare(X, y, resid, fitted, terms=terms, has_intercept=has_intercept, weights=weights, precise=precise)
    tests: list[tuple[str, Callable[[_Data], _Outcome]]] = [
        ("constant_variance", _constant_variance),
        ("independence", _independence),
        ("normality_shapiro", partial(_normality, shapiro=True)),
        ("normality_jarque_bera", partial(_normality, shapiro=False)),
        ("curvature", _curvature),
        ("lack_of_fit", _lack_of_fit),
    ]
    judged = tuple(_judge(name, d.why_not or test(d), alpha) for name, test in tests)
    return (*judged, _collinearity(d, weights), _influence(d, infl, alpha))
