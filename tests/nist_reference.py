"""Extended-precision reference values for the NIST StRD linear sets, computed with mpmath.

Independent of sitegen's solver and of numpy's floating point: the data are the
float64 values the program reads (each exactly an mpmath number), the design is
formed in mpmath, and every figure is computed by its textbook formula at
``DIGITS`` decimal digits (normal equations solved by mpmath's LU; at 80 digits
their cond² loss on NIST Filip still leaves some 50 digits). Formulas (common
practice unless named):

- OLS, leverage h = x'(X'X)⁻¹x, internally/externally studentized residuals,
  Cook's distance, DFFITS, intervals t·s·√h and t·s·√(1 + h) (t from scipy);
- Breusch–Pagan in Koenker's studentized form (n·R² of e² on [1, predictors]),
  as statsmodels' ``het_breuschpagan``; χ² tail by mpmath's regularised gamma;
- RESET with the squared and cubed centred fitted values, F tail by mpmath's
  regularised incomplete beta; lack of fit against pure error of repeated settings;
- variance inflation factors as the diagonal of the inverse correlation matrix;
- the condition number of the unit-column design from the eigenvalues of its Gram matrix;
- Durbin–Watson d, and P(D ≤ d) under independent normal errors from the
  eigenvalues of MAM (mpmath's Jacobi ``eigsy``) and Imhof's (1961) inversion
  integral by mpmath's tanh-sinh quadrature at ``DW_DIGITS`` digits;
- Jarque–Bera from the biased moments (χ²₂ tail exp(−JB/2));
- Shapiro–Wilk's W and p-value by Royston's algorithm AS R94 (Applied Statistics 44, 1995; the
  polynomial coefficients as published there, the same ones scipy's ``swilk`` carries) carried out
  in mpmath: the algorithm is itself an approximation to the exact null distribution, so what this
  checks is that the program evaluates that published algorithm without losing digits on hard data;
- HC3 standard errors (MacKinnon & White 1985): the diagonal of
  (X'X)⁻¹ X' diag(eᵢ²/(1 − hᵢ)²) X (X'X)⁻¹ formed directly.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cache
from typing import Any

import mpmath as mp
import pandas as pd
from nist_data import load_nist
from scipy import stats

DIGITS = 80
DW_DIGITS = 30


@dataclass
class Reference:
    """Reference figures of one set: scalars and per-row lists, as Python floats (rounded from mpmath)."""

    scalars: dict[str, float] = field(default_factory=dict)
    rows: dict[str, list[float]] = field(default_factory=dict)
    exact_fit: bool = False


def _design(name: str) -> tuple[list[list[Any]], list[Any], bool, list[list[float]]]:
    import json

    from nist_data import NIST_DIR

    entry = json.loads((NIST_DIR / "certified.json").read_text(encoding="utf-8"))[name]
    frame = pd.read_csv(NIST_DIR / f"{name}.csv")
    y = [mp.mpf(float(v)) for v in frame["y"]]
    if isinstance(entry.get("predictors"), list):
        raw = [[float(v) for v in frame[c]] for c in entry["predictors"]]
        cols = [[mp.mpf(v) for v in col] for col in raw]
    else:
        x = [float(v) for v in frame["x"]]
        raw = [x]
        cols = [[mp.mpf(v) ** k for v in x] for k in range(1, int(entry["degree"]) + 1)]
    intercept = bool(entry["intercept"])
    if intercept:
        cols = [[mp.mpf(1)] * len(y), *cols]
    n = len(y)
    X = [[col[i] for col in cols] for i in range(n)]
    return X, y, intercept, raw


def _solve(X: list[list[Any]], y: list[Any]) -> tuple[list[Any], Any]:
    """Least squares by the normal equations in mpmath: (coefficients, (X'X)⁻¹)."""
    n, p = len(X), len(X[0])
    G = mp.matrix(p, p)
    b = mp.matrix(p, 1)
    for j in range(p):
        b[j] = mp.fsum(X[i][j] * y[i] for i in range(n))
        for k in range(j, p):
            G[j, k] = G[k, j] = mp.fsum(X[i][j] * X[i][k] for i in range(n))
    G_inv = mp.inverse(G)
    beta = G_inv * b
    return [beta[j] for j in range(p)], G_inv


def _ssr(X: list[list[Any]], y: list[Any]) -> Any:
    beta, _ = _solve(X, y)
    return mp.fsum((y[i] - mp.fsum(a * b for a, b in zip(X[i], beta, strict=True))) ** 2 for i in range(len(y)))


def _f_sf(f: Any, d1: int, d2: int) -> Any:
    return mp.betainc(mp.mpf(d2) / 2, mp.mpf(d1) / 2, 0, d2 / (d2 + d1 * f), regularized=True)


def _chi2_sf(x: Any, k: int) -> Any:
    return mp.gammainc(mp.mpf(k) / 2, x / 2, mp.inf, regularized=True)


def _hc3(X: list[list[Any]], e: list[Any], h: list[Any], G_inv: Any) -> list[Any]:
    """HC3 standard errors: √diag((X'X)⁻¹ X'ΩX (X'X)⁻¹), Ω = diag(eᵢ²/(1 − hᵢ)²)."""
    n, p = len(X), len(X[0])
    meat = mp.matrix(p, p)
    for j in range(p):
        for k in range(j, p):
            meat[j, k] = meat[k, j] = mp.fsum(X[i][j] * X[i][k] * (e[i] / (1 - h[i])) ** 2 for i in range(n))
    cov = G_inv * meat * G_inv
    return [mp.sqrt(cov[j, j]) for j in range(p)]


# Royston (1995), AS R94: polynomial coefficients (lowest power first), as published.
_SW_C1 = ("0.0", "0.221157", "-0.147981", "-2.071190", "4.434685", "-2.706056")
_SW_C2 = ("0.0", "0.042981", "-0.293762", "-1.752461", "5.682633", "-3.582633")
_SW_C3 = ("0.5440", "-0.39978", "0.025054", "-6.714e-4")
_SW_C4 = ("1.3822", "-0.77857", "0.062767", "-0.0020322")
_SW_C5 = ("-1.5861", "-0.31082", "-0.083751", "0.0038915")
_SW_C6 = ("-0.4803", "-0.082676", "0.0030302")
_SW_G = ("-2.273", "0.459")


def _poly(coefs: tuple[str, ...], x: Any) -> Any:
    return mp.fsum(mp.mpf(c) * x**k for k, c in enumerate(coefs))


def shapiro_reference(values: list[Any]) -> tuple[Any, Any]:
    """Shapiro–Wilk's (W, p) by AS R94 in mpmath at the current precision (3 ≤ n ≤ 5,000)."""
    x = sorted(values)
    n = len(x)
    mean = mp.fsum(x) / n
    ssq = mp.fsum((v - mean) ** 2 for v in x)
    if n == 3:
        a = [mp.sqrt(mp.mpf(1) / 2)]
    else:
        m = [mp.sqrt(2) * mp.erfinv(2 * ((i - mp.mpf(3) / 8) / (n + mp.mpf(1) / 4)) - 1) for i in range(1, n + 1)]
        summ2 = mp.fsum(v * v for v in m)
        ssumm2 = mp.sqrt(summ2)
        rsn = 1 / mp.sqrt(n)
        low = [-v for v in m[: n // 2]]  # positive
        a = [mp.mpf(0)] * (n // 2)
        a[0] = _poly(_SW_C1, rsn) + low[0] / ssumm2
        if n > 5:
            a[1] = low[1] / ssumm2 + _poly(_SW_C2, rsn)
            fac = mp.sqrt((summ2 - 2 * low[0] ** 2 - 2 * low[1] ** 2) / (1 - 2 * a[0] ** 2 - 2 * a[1] ** 2))
            a[2:] = [v / fac for v in low[2:]]
        else:
            fac = mp.sqrt((summ2 - 2 * low[0] ** 2) / (1 - 2 * a[0] ** 2))
            a[1:] = [v / fac for v in low[1:]]
    num = mp.fsum(a[i] * (x[n - 1 - i] - x[i]) for i in range(n // 2))
    w = min(num * num / ssq, mp.mpf(1))
    if n == 3:
        return w, min(max(6 / mp.pi * (mp.asin(mp.sqrt(w)) - mp.pi / 3), 0), 1)
    w1 = 1 - w
    if n <= 11:
        gamma = _poly(_SW_G, mp.mpf(n))
        y = -mp.log(gamma - mp.log(w1))
        mu, sd = _poly(_SW_C3, mp.mpf(n)), mp.exp(_poly(_SW_C4, mp.mpf(n)))
    else:
        ln = mp.log(n)
        y = mp.log(w1)
        mu, sd = _poly(_SW_C5, ln), mp.exp(_poly(_SW_C6, ln))
    return w, mp.erfc((y - mu) / sd / mp.sqrt(2)) / 2


def imhof_below_zero(mu: list[Any]) -> Any:
    """P(Σ μ_j χ²_1,j < 0) by Imhof's integral, by mpmath quadrature at the current precision."""
    big = max(abs(m) for m in mu)
    m = [v / big for v in mu if v != 0]

    def integrand(u: Any) -> Any:
        if u == 0:
            return mp.fsum(m) / 2
        theta = mp.fsum(mp.atan(v * u) for v in m) / 2
        log_rho = mp.fsum(mp.log1p((v * u) ** 2) for v in m) / 4
        return mp.sin(theta) / u * mp.exp(-log_rho)

    return mp.mpf(1) / 2 - mp.quad(integrand, [0, 1, 10, mp.inf]) / mp.pi


def dw_reference(X: list[list[Any]], e: list[Any]) -> tuple[Any, Any]:
    """Durbin–Watson d and its exact lower-tail probability."""
    n, p = len(X), len(X[0])
    d = mp.fsum((e[i + 1] - e[i]) ** 2 for i in range(n - 1)) / mp.fsum(v * v for v in e)
    with mp.workdps(DW_DIGITS):
        _, G_inv = _solve(X, [mp.mpf(0)] * n)
        Xm = mp.matrix(X)
        H = Xm * G_inv * Xm.T
        lam = dw_weights(mp.eye(n) - H, p)
        prob = imhof_below_zero([v - d for v in lam])
    return d, prob


def dw_weights(M: Any, p: int) -> list[Any]:
    """The eigenvalues of M A M on the residual space, at mpmath's working precision: A = D'D (D the first
    differences), M = I − H for a design of ``p`` columns; P(d ≤ c) = P(Σ (λ − c) χ²₁ ≤ 0) over them
    (Durbin and Watson, 1950)."""
    n = M.rows
    A = mp.matrix(n, n)
    for i in range(n):
        A[i, i] = 2 if 0 < i < n - 1 else 1
        if i + 1 < n:
            A[i, i + 1] = A[i + 1, i] = -1
    B = M * A * M
    return sorted(mp.eigsy((B + B.T) / 2, eigvals_only=True))[p:]


@cache
def reference(name: str) -> Reference:
    """Every reference figure of NIST set ``name`` (cached: the Durbin–Watson part takes seconds)."""
    case = load_nist(name)
    out = Reference()
    with mp.workdps(DIGITS):
        X, y, intercept, raw = _design(name)
        n, p = len(X), len(X[0])
        df = n - p
        beta, G_inv = _solve(X, y)
        fitted = [mp.fsum(a * b for a, b in zip(row, beta, strict=True)) for row in X]
        e = [y[i] - fitted[i] for i in range(n)]
        ssr = mp.fsum(v * v for v in e)
        ybar = mp.fsum(y) / n
        tss = mp.fsum((v - ybar) ** 2 for v in y) if intercept else mp.fsum(v * v for v in y)
        s2 = ssr / df
        s = mp.sqrt(s2)
        out.exact_fit = bool(mp.sqrt(ssr) <= mp.mpf(64) * mp.mpf(2) ** -52 * mp.sqrt(mp.fsum(v * v for v in y)))
        h = [mp.fsum(X[i][j] * G_inv[j, k] * X[i][k] for j in range(p) for k in range(p)) for i in range(n)]
        se = [mp.sqrt(s2 * G_inv[j, j]) for j in range(p)]
        df_model = p - 1 if intercept else p
        out.scalars |= {
            "r_squared": float(1 - ssr / tss),
            "adj_r_squared": float(1 - (ssr / tss) * (n - 1 if intercept else n) / df),
        }
        out.rows |= {"coefficients": [float(b) for b in beta], "leverage": [float(v) for v in h]}
        out.rows["fitted"] = [float(v) for v in fitted]
        t_crit = float(stats.t.ppf(0.975, df))
        if not out.exact_fit:  # NIST certifies s = 0 for the exact fits: ratios to s are undefined there
            out.scalars["residual_sd"] = float(s)
            out.scalars["f_stat"] = float(((tss - ssr) / df_model) / s2)
            out.scalars["f_p_value"] = float(_f_sf((tss - ssr) / df_model / s2, df_model, df))
            out.rows["std_errors"] = [float(v) for v in se]
            out.rows["t_stat"] = [float(b / v) for b, v in zip(beta, se, strict=True)]
            out.rows["residual"] = [float(v) for v in e]
            std = [e[i] / (s * mp.sqrt(1 - h[i])) for i in range(n)]
            deleted = [(ssr - e[i] ** 2 / (1 - h[i])) / (df - 1) for i in range(n)]
            stud = [e[i] / mp.sqrt(deleted[i] * (1 - h[i])) for i in range(n)]
            out.rows["standardized_residual"] = [float(v) for v in std]
            out.rows["studentized_residual"] = [float(v) for v in stud]
            out.rows["cooks_distance"] = [float(std[i] ** 2 * h[i] / (p * (1 - h[i]))) for i in range(n)]
            out.rows["dffits"] = [float(stud[i] * mp.sqrt(h[i] / (1 - h[i]))) for i in range(n)]
            half_mean = [t_crit * s * mp.sqrt(v) for v in h]
            half_pred = [t_crit * s * mp.sqrt(1 + v) for v in h]
            out.rows["mean_ci_low"] = [float(f - m) for f, m in zip(fitted, half_mean, strict=True)]
            out.rows["mean_ci_high"] = [float(f + m) for f, m in zip(fitted, half_mean, strict=True)]
            out.rows["pred_low"] = [float(f - m) for f, m in zip(fitted, half_pred, strict=True)]
            out.rows["pred_high"] = [float(f + m) for f, m in zip(fitted, half_pred, strict=True)]
            _residual_tests(out, X, y, e, fitted, raw, intercept=intercept, ssr=ssr)
            out.rows["hc3_std_errors"] = [float(v) for v in _hc3(X, e, h, G_inv)]
        _collinearity(out, X, intercept=intercept)
    assert case.df_residual == df
    return out


def _residual_tests(
    out: Reference,
    X: list[list[Any]],
    y: list[Any],
    e: list[Any],
    fitted: list[Any],
    raw: list[list[float]],
    *,
    intercept: bool,
    ssr: Any,
) -> None:
    n, p = len(X), len(X[0])
    df = n - p
    # Breusch–Pagan (Koenker): u = e² on [1, predictors]
    u = [v * v for v in e]
    Z = [[mp.mpf(1)] + (X[i][1:] if intercept else X[i]) for i in range(n)]
    ubar = mp.fsum(u) / n
    r2 = 1 - _ssr(Z, u) / mp.fsum((v - ubar) ** 2 for v in u)
    lm = n * r2
    out.scalars["breusch_pagan"] = float(lm)
    out.scalars["breusch_pagan_p"] = float(_chi2_sf(lm, len(Z[0]) - 1))
    # RESET with the squared and cubed centred, scaled fitted values
    fbar = mp.fsum(fitted) / n if intercept else mp.mpf(0)
    z = [v - fbar for v in fitted]
    zmax = max(abs(v) for v in z)
    z = [v / zmax for v in z]
    if df - 2 >= 1:  # else the test has no degrees of freedom left (the program says so)
        aug = [[*X[i], z[i] ** 2, z[i] ** 3] for i in range(n)]
        rest = _ssr(aug, y)
        reset = ((ssr - rest) / 2) / (rest / (df - 2))
        out.scalars["reset_f"] = float(reset)
        out.scalars["reset_p"] = float(_f_sf(reset, 2, df - 2))
    # lack of fit against the pure error of repeated predictor settings
    groups: dict[tuple[float, ...], list[int]] = {}
    for i in range(n):
        groups.setdefault(tuple(col[i] for col in raw), []).append(i)
    m = len(groups)
    df_pe, df_lof = n - m, m - p
    if df_pe >= 1 and df_lof >= 1:
        ss_pe = mp.mpf(0)
        for rows in groups.values():
            mean = mp.fsum(y[i] for i in rows) / len(rows)
            ss_pe += mp.fsum((y[i] - mean) ** 2 for i in rows)
        lof = ((ssr - ss_pe) / df_lof) / (ss_pe / df_pe)
        out.scalars["lack_of_fit_f"] = float(lof)
        out.scalars["lack_of_fit_p"] = float(_f_sf(lof, df_lof, df_pe))
    # Jarque–Bera from the biased moments
    mean_e = mp.fsum(e) / n
    c = [v - mean_e for v in e]
    m2 = mp.fsum(v**2 for v in c) / n
    skew = (mp.fsum(v**3 for v in c) / n) / m2**1.5
    kurt = (mp.fsum(v**4 for v in c) / n) / m2**2
    jb = n / mp.mpf(6) * (skew**2 + (kurt - 3) ** 2 / 4)
    out.scalars["jarque_bera"] = float(jb)
    out.scalars["jarque_bera_p"] = float(mp.exp(-jb / 2))
    w, w_p = shapiro_reference(e)
    out.scalars["shapiro_w"] = float(w)
    out.scalars["shapiro_p"] = float(w_p)
    d, prob = dw_reference(X, e)
    out.scalars["durbin_watson"] = float(d)
    out.scalars["durbin_watson_p"] = float(prob)


def _collinearity(out: Reference, X: list[list[Any]], *, intercept: bool) -> None:
    n, p = len(X), len(X[0])
    norms = [mp.sqrt(mp.fsum(X[i][j] ** 2 for i in range(n))) for j in range(p)]
    G = mp.matrix(p, p)
    for j in range(p):
        for k in range(j, p):
            G[j, k] = G[k, j] = mp.fsum(X[i][j] * X[i][k] for i in range(n)) / (norms[j] * norms[k])
    ev = mp.eigsy(G, eigvals_only=True)
    out.scalars["condition_number"] = float(mp.sqrt(max(ev) / min(ev)))
    if intercept and p >= 3:
        k = p - 1
        cols = [[X[i][j] for i in range(n)] for j in range(1, p)]
        means = [mp.fsum(c) / n for c in cols]
        C = mp.matrix(k, k)
        for a in range(k):
            for b in range(a, k):
                C[a, b] = C[b, a] = mp.fsum((cols[a][i] - means[a]) * (cols[b][i] - means[b]) for i in range(n))
        C_inv = mp.inverse(C)
        out.rows["vif"] = [float(C_inv[a, a] * C[a, a]) for a in range(k)]
