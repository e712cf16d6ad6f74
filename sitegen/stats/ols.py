"""Ordinary (and weighted) least squares with the inference a report needs.

Estimates come from :mod:`sitegen.stats.solver` (extended precision), and so
does everything per row: residuals and fitted values from the refined residual,
leverages from the extended-precision Q, x'(X'X)⁻¹x from W = S·R⁻¹ in extended
precision; the t and F distributions from scipy. statsmodels is the independent reference in
the tests, not the engine here, because its default solver loses digits on
ill-conditioned designs (NIST StRD Filip).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.stats import distributions as dist
from sitegen.stats.solver import Ext, Ops, kind_of, ops, solve

FloatArray = NDArray[np.float64]
#: Residuals below this fraction of the (weighted) response are rounding residue of an exact
#: fit: float64 data carry nothing below it (NIST StRD Wampler1/2 certify zero residuals).
EXACT_FIT_RTOL = 64 * float(np.finfo(np.float64).eps)


@dataclass(frozen=True, slots=True)
class OlsFit:
    """Estimates, their uncertainty and the per-observation quantities of one fit."""

    terms: tuple[str, ...]
    beta: FloatArray
    std_error: FloatArray
    t_stat: FloatArray
    p_value: FloatArray
    ci_low: FloatArray
    ci_high: FloatArray
    xtx_inv: FloatArray
    xtx_root: FloatArray  # W with W W' = xtx_inv, from the QR factor: use it for x'(X'X)^-1 x
    n: int
    df_model: int
    df_resid: int
    ssr: float
    tss: float  # centred (uncentred without an intercept), weighted when weights are given
    r_squared: float
    adj_r_squared: float
    sigma: float
    f_stat: float
    f_p_value: float
    fitted: FloatArray
    resid: FloatArray  # y − fitted, on the response's scale (unweighted)
    leverage: FloatArray
    q: FloatArray  # thin Q of the (weighted, scaled) design
    effects: FloatArray  # Q'y: the sequential sums of squares are their squares
    condition: float
    level: float
    t_crit: float
    has_intercept: bool
    beta_ext: Ext = None  # the coefficients in the solver's extended arithmetic
    root_ext: Ext = None  # W in the solver's extended arithmetic
    resid_ext: Ext = None  # y − fitted in the solver's extended arithmetic (unweighted)
    y_ext: Ext = None  # the response in the solver's extended arithmetic
    q_ext: Ext = None  # the thin Q in the solver's extended arithmetic (small designs only; see solver.KEEP_Q_CELLS)


def _nan_div(a: float, b: float) -> float:
    return a / b if b != 0 else float("nan")


def fit_ols(
    X: NDArray[np.longdouble],
    y: NDArray[np.longdouble],
    terms: tuple[str, ...],
    *,
    has_intercept: bool,
    level: float,
    weights: FloatArray | None = None,
) -> OlsFit:
    """Fit y = Xb + e by (weighted) least squares and compute the classical inference."""
    n, p = X.shape
    if n <= p:
        raise FitError(
            f"{n} usable row(s) for {p} coefficient(s): the fit needs more rows than coefficients "
            "to estimate its uncertainty",
            hint=f"add data (at least {p + 1} rows with all model columns present) or simplify the model",
        )
    o = ops()
    X, y = o.of(X), o.of(y)
    sw: Ext = None
    if weights is not None:
        if not bool(np.all(np.isfinite(weights))) or bool(np.any(weights <= 0)):
            raise FitError("weights must be positive, finite numbers in every used row")
        sw = o.sqrt(o.of(weights))
        sol = solve(X * sw[:, None], y * sw, terms)
        resid_ext = sol.resid_ext / sw
    else:
        sol = solve(X, y, terms)
        resid_ext = sol.resid_ext
    # Per-row values from the refined residual (never y − Xb in float64: on NIST Filip that
    # subtraction of nearly equal numbers keeps only about seven digits).
    fitted = o.f(y - resid_ext)
    resid = o.f(resid_ext)
    ssr = sol.ssr
    yw = y if sw is None else y * sw
    if np.sqrt(ssr) <= EXACT_FIT_RTOL * float(np.sqrt(float(o.f(o.dot(yw, yw))))):
        # An exact fit: what is left is rounding, not scatter. SE 0, F infinite, and no
        # influence flags computed on noise (as NIST certifies for Wampler1/2).
        resid = np.zeros(n)
        resid_ext = o.of(resid)
        fitted = o.f(y)
        ssr = 0.0
    w = o.of(np.ones(n) if weights is None else weights)
    if has_intercept:
        ybar = o.dot(w, y) / o.dot(w, o.of(np.ones(n)))
        dev = y - ybar
        tss = float(o.f(o.dot(w * dev, dev)))
    else:
        tss = float(o.f(o.dot(w * y, y)))
    return estimated_fit(
        Estimates(terms, sol.beta, sol.xtx_inv, sol.xtx_root, sol.effects, sol.condition, sol.beta_ext, sol.root_ext),
        n=n,
        has_intercept=has_intercept,
        level=level,
        ssr=ssr,
        tss=tss,
        per_row=(fitted, resid, sol.leverage, sol.q),
        resid_ext=resid_ext,
        y_ext=y,
        q_ext=sol.q_ext,
    )


@dataclass(frozen=True, slots=True)
class Estimates:
    """What a solver gives a fit: the coefficients and the pieces their inference is computed from."""

    terms: tuple[str, ...]
    beta: FloatArray
    xtx_inv: FloatArray
    xtx_root: FloatArray
    effects: FloatArray
    condition: float
    beta_ext: Ext
    root_ext: Ext


def estimated_fit(
    est: Estimates,
    *,
    n: int,
    has_intercept: bool,
    level: float,
    ssr: float,
    tss: float,
    per_row: tuple[FloatArray, FloatArray, FloatArray, FloatArray] | None = None,
    resid_ext: Ext = None,
    y_ext: Ext = None,
    q_ext: Ext = None,
) -> OlsFit:
    """The fit of these estimates with its inference (:func:`with_inference`): the one place that sets the
    degrees of freedom and the derived fields, for a file read whole or in chunks. ``per_row`` holds the
    fitted values, residuals, leverages and thin Q (None: a fit made in chunks, which keeps no rows)."""
    p = len(est.terms)
    fitted, resid, leverage, q = per_row if per_row is not None else (np.empty(0),) * 3 + (np.empty((0, p)),)
    beta = est.beta
    return with_inference(
        OlsFit(
            terms=est.terms,
            beta=beta,
            std_error=beta,
            t_stat=beta,
            p_value=beta,
            ci_low=beta,
            ci_high=beta,
            xtx_inv=est.xtx_inv,
            xtx_root=est.xtx_root,
            n=n,
            df_model=p - 1 if has_intercept else p,
            df_resid=n - p,
            ssr=ssr,
            tss=tss,
            r_squared=0.0,
            adj_r_squared=0.0,
            sigma=0.0,
            f_stat=0.0,
            f_p_value=0.0,
            fitted=fitted,
            resid=resid,
            leverage=leverage,
            q=q,
            effects=est.effects,
            condition=est.condition,
            level=level,
            t_crit=0.0,
            has_intercept=has_intercept,
            beta_ext=est.beta_ext,
            root_ext=est.root_ext,
            resid_ext=resid_ext,
            y_ext=y_ext,
            q_ext=q_ext,
        )
    )


def with_inference(fit: OlsFit) -> OlsFit:
    """The fit with its classical inference (standard errors, t, p, intervals, R², F) computed from its
    coefficients, (X'X)⁻¹, sums of squares and degrees of freedom (also for a fit made in chunks)."""
    from dataclasses import replace  # noqa: PLC0415

    beta, ssr, tss, df_resid, df_model = fit.beta, fit.ssr, fit.tss, fit.df_resid, fit.df_model
    sigma2 = ssr / df_resid
    sigma = float(np.sqrt(sigma2))
    se = np.sqrt(np.clip(np.diag(fit.xtx_inv) * sigma2, 0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        t_stat = np.where(se > 0, beta / se, np.where(beta == 0, np.nan, np.copysign(np.inf, beta)))
    p_value = 2 * dist.t_sf(np.abs(t_stat), df_resid)
    t_crit = dist.t_ppf(0.5 + fit.level / 2, df_resid)
    r2 = 1 - _nan_div(ssr, tss) if tss > 0 else float("nan")
    dof_total = fit.n - 1 if fit.has_intercept else fit.n
    adj = 1 - (1 - r2) * dof_total / df_resid if tss > 0 else float("nan")
    if df_model > 0 and ssr > 0:
        f_stat = ((tss - ssr) / df_model) / sigma2
        f_p = dist.f_sf(f_stat, df_model, df_resid)
    elif df_model > 0 and tss > 0:
        f_stat, f_p = float("inf"), 0.0
    else:
        f_stat, f_p = float("nan"), float("nan")
    return replace(
        fit,
        std_error=se,
        t_stat=t_stat,
        p_value=p_value,
        ci_low=beta - t_crit * se,
        ci_high=beta + t_crit * se,
        r_squared=r2,
        adj_r_squared=adj,
        sigma=sigma,
        f_stat=float(f_stat),
        f_p_value=f_p,
        t_crit=t_crit,
    )


@dataclass(frozen=True, slots=True)
class Bands:
    """Confidence interval of the mean and prediction interval at given design rows."""

    fit: FloatArray
    se_mean: FloatArray
    mean_low: FloatArray
    mean_high: FloatArray
    pred_low: FloatArray
    pred_high: FloatArray


def bands(fit: OlsFit, X_new: FloatArray, weights: FloatArray | None = None) -> Bands:
    """Intervals at new (or observed) rows; ``weights`` are the weights of the new readings
    (prediction variance σ²/w; weight 1 when None)."""
    with np.errstate(all="ignore"):
        return _bands(fit, X_new, weights)


def _bands(fit: OlsFit, X_new: FloatArray, weights: FloatArray | None) -> Bands:
    # x'b and x'(X'X)^-1 x as ||x'W||², both in extended precision (W from the QR factor): never
    # negative, and free of the cancellation they suffer in float64 on ill-conditioned designs.
    Xf = np.asarray(X_new, dtype=float)
    if fit.beta_ext is not None and fit.root_ext is not None:
        o = Ops(kind_of(fit.beta_ext))
        Xe = o.of(Xf)
        yhat = o.f(o.dot(Xe, o.of(fit.beta_ext)))
        z = o.dot(Xe, o.of(fit.root_ext))
        quad = o.f(o.rowsum(z * z))
    else:
        yhat = Xf @ fit.beta
        zf = Xf @ fit.xtx_root
        quad = np.sum(zf * zf, axis=1)
    return _intervals(fit, yhat, quad, weights)


def row_bands(fit: OlsFit, weights: FloatArray | None = None, reading_weight: float = 1.0) -> Bands:
    """Intervals at the observed rows, from the fit's own per-row values.

    The fitted values come from the refined residuals and x'(X'X)⁻¹x is the leverage
    (divided by the row's weight for a weighted fit), so no design row is multiplied out
    again. ``weights`` are the fit's weights; the prediction interval is for one new
    reading of weight ``reading_weight`` (variance σ²/reading_weight), the same weight
    that :func:`bands` is given for the chart band and predictions.
    """
    quad = np.asarray(fit.leverage, dtype=float)
    if weights is not None:
        quad = quad / np.asarray(weights, dtype=float)
    with np.errstate(all="ignore"):
        return _intervals(fit, np.asarray(fit.fitted, dtype=float), quad, np.full(fit.n, float(reading_weight)))


def _intervals(fit: OlsFit, yhat: FloatArray, quad: FloatArray, weights: FloatArray | None) -> Bands:
    var_mean = quad * fit.sigma**2
    se_mean = np.sqrt(var_mean)
    noise = fit.sigma**2 if weights is None else fit.sigma**2 / weights
    se_pred = np.sqrt(var_mean + noise)
    return Bands(
        fit=yhat,
        se_mean=se_mean,
        mean_low=yhat - fit.t_crit * se_mean,
        mean_high=yhat + fit.t_crit * se_mean,
        pred_low=yhat - fit.t_crit * se_pred,
        pred_high=yhat + fit.t_crit * se_pred,
    )


@dataclass(frozen=True, slots=True)
class AnovaRow:
    """One line of the sequential (type I) analysis-of-variance table."""

    source: str
    df: int
    sum_sq: float
    mean_sq: float
    f_stat: float | None
    p_value: float | None


def anova_table(fit: OlsFit) -> tuple[AnovaRow, ...]:
    """Sequential sums of squares from the QR effects, one row per term, then the residual."""
    rows: list[AnovaRow] = []
    sigma2 = fit.ssr / fit.df_resid
    for term, effect in zip(fit.terms, fit.effects, strict=True):
        if term == "Intercept" and fit.has_intercept:
            continue
        ss = float(effect * effect)
        f = ss / sigma2 if sigma2 > 0 else float("inf")
        rows.append(AnovaRow(term, 1, ss, ss, f, dist.f_sf(f, 1, fit.df_resid)))
    rows.append(AnovaRow("Residual", fit.df_resid, fit.ssr, sigma2, None, None))
    return tuple(rows)
