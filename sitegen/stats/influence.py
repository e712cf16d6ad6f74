"""How much each observation pulls on an OLS fit, from closed forms.

All measures come from the hat diagonal and the residuals in O(n·p) time; the
fit is never repeated with a row left out. With ``h`` the leverage, ``e`` the
residual, ``s² = SSR / df`` and ``p`` the number of coefficients:

- leverage ``h_i = Σ_j Q_ij²`` (Q: thin QR factor of the design);
- standardized (internally studentized) residual ``r_i = e_i / (s √(1 − h_i))``;
- studentized (externally studentized) residual ``t_i = e_i / (s_(i) √(1 − h_i))``
  with the leave-one-out variance ``s_(i)² = (SSR − e_i² / (1 − h_i)) / (df − 1)``;
- Cook's distance ``D_i = r_i² h_i / (p (1 − h_i))``;
- DFFITS ``t_i √(h_i / (1 − h_i))``.

Undefined values are NaN, never a warning: every measure but leverage when
``h_i ≈ 1`` (the point alone sets a coefficient, its residual is zero whatever
its response) or when the residual variance is zero or has no degrees of
freedom; the studentized residual and DFFITS also when ``df ≤ 1``. When the
other rows fit exactly (``s_(i) = 0``) a non-zero residual has an infinite
studentized residual and DFFITS.

Weighted fits: ``q`` comes from the weighted design (rows times √w) and the
residuals are on the response's scale; pass ``weights`` and they are weighted
here the same way.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

#: A leverage above this counts as 1: the point alone determines a coefficient.
LEVERAGE_ONE = 1.0 - 1e-10
#: Leave-one-out residual sums of squares below this fraction of SSR are rounding noise.
_DELETED_SSR_FLOOR = 1e-13


@dataclass(frozen=True, slots=True)
class Influence:
    """Per-observation influence measures, in row order (NaN where undefined).

    Arrays rather than tuples: a million rows would otherwise cost a float object each.
    """

    leverage: FloatArray  # hat diagonal
    studentized_residual: FloatArray  # externally studentized
    standardized_residual: FloatArray  # internally studentized
    cooks_distance: FloatArray
    dffits: FloatArray


def whitened_residuals(resid: FloatArray, weights: FloatArray | None) -> FloatArray:
    """Residuals on the scale of the weighted design: ``√w · e`` (``e`` unchanged without weights)."""
    e = np.asarray(resid, dtype=np.float64)
    if weights is None:
        return e
    w = np.asarray(weights, dtype=np.float64)
    if w.shape != e.shape:
        raise ValueError(f"weights have shape {w.shape}, residuals {e.shape}")
    return e * np.sqrt(w)


def influence(q: FloatArray, resid: FloatArray, df_resid: int, *, weights: FloatArray | None = None) -> Influence:
    """Leverage, studentized residuals, Cook's distance and DFFITS of every row.

    ``q`` is the thin Q factor (n × p) of the (weighted) design, ``resid`` the
    residuals y − fitted in row order, ``df_resid`` the residual degrees of
    freedom (n − p for a full-rank design). Raises ``ValueError`` only on
    mismatched shapes, a programming error.
    """
    q = np.asarray(q, dtype=np.float64)
    e = whitened_residuals(resid, weights)
    if q.ndim != 2 or e.ndim != 1 or q.shape[0] != e.shape[0]:
        raise ValueError(f"q has shape {q.shape} but resid has shape {e.shape}")
    p = q.shape[1]
    h = np.einsum("ij,ij->i", q, q)
    return influence_rows(h, e, float(e @ e), df_resid, p)


def influence_rows(h: FloatArray, e: FloatArray, ssr: float, df_resid: int, p: int) -> Influence:
    """The measures of some rows from their leverages ``h`` and (weighted) residuals ``e``, given the fit's
    residual sum of squares ``ssr`` over all rows (so rows may come a chunk at a time)."""
    n = len(h)
    nan = np.full(n, np.nan)
    with np.errstate(all="ignore"):
        defined = h <= LEVERAGE_ONE
        one_minus_h = np.where(defined, 1.0 - h, np.nan)
        s2 = ssr / df_resid if df_resid >= 1 else math.nan
        if s2 > 0 and math.isfinite(s2):
            standardized = e / np.sqrt(s2 * one_minus_h)
            cooks = standardized**2 * h / (p * one_minus_h)
        else:
            standardized, cooks = nan, nan
        if df_resid >= 2 and ssr > 0 and math.isfinite(ssr):
            deleted_ssr = ssr - e**2 / one_minus_h
            deleted_ssr = np.where(deleted_ssr > _DELETED_SSR_FLOOR * ssr, deleted_ssr, 0.0)
            deleted_ssr[~defined] = np.nan
            studentized = e / np.sqrt(deleted_ssr / (df_resid - 1) * one_minus_h)
            dffits = studentized * np.sqrt(h / one_minus_h)
        else:
            studentized, dffits = nan, nan
    return Influence(
        leverage=np.asarray(h, dtype=np.float64),
        studentized_residual=np.asarray(studentized, dtype=np.float64),
        standardized_residual=np.asarray(standardized, dtype=np.float64),
        cooks_distance=np.asarray(cooks, dtype=np.float64),
        dffits=np.asarray(dffits, dtype=np.float64),
    )


@dataclass(frozen=True, slots=True)
class PointFlags:
    """Which rows cross each common rule-of-thumb cut-off, and the cut-offs used.

    NaN measures never cross a cut-off. ``rows`` lists the 0-based indices of
    rows marked by at least one rule, in row order. The marks are arrays (a tuple of a
    million Python booleans costs 8 MB each).
    """

    high_leverage: BoolArray  # leverage > leverage_cutoff
    leverage_one: BoolArray  # leverage ≈ 1: this point alone sets a coefficient
    large_residual: BoolArray  # |studentized residual| > residual_cutoff
    large_cooks: BoolArray  # Cook's distance > cooks_cutoff
    large_dffits: BoolArray  # |DFFITS| > dffits_cutoff
    leverage_cutoff: float
    residual_cutoff: float
    cooks_cutoff: float
    dffits_cutoff: float
    rows: tuple[int, ...]
    marked: BoolArray | None = None  # the rows in ``rows``, as a mark per row (None: every crossing marks)


def flag_points(infl: Influence, n: int, p: int, designed: NDArray[np.bool_] | None = None) -> PointFlags:
    """Mark rows by the usual rules of thumb (all common practice).

    ``designed`` marks rows whose x are set values of the design (a calibration's standards, replicated or
    not, its end points included; a setting measured more than once): their leverage is the design's
    choice, so leverage above 2p/n does not mark them, nor do Cook's distance above 4/n and |DFFITS| above
    2√(p/n), which grow with leverage alone. They are marked only when leverage combines with a large
    residual (|studentized residual| above 3) or a large influence (Cook's distance above the median of
    F(p, n − p), the stricter limit of the model check on influence), or at leverage 1. An unmarked row
    carries no reason at all (``marked``), so downloads do not list a leverage the page does not flag.

    - leverage above 2p/n (twice the average leverage p/n);
    - leverage ≈ 1 (above ``LEVERAGE_ONE``): the point alone sets a coefficient;
    - |externally studentized residual| above 3;
    - Cook's distance above 4/n;
    - |DFFITS| above 2√(p/n).
    """
    if n != len(infl.leverage) or n < 1 or p < 1:
        raise ValueError(f"n={n}, p={p} do not match {len(infl.leverage)} influence rows")
    lev_cut, res_cut, cooks_cut, dffits_cut = 2.0 * p / n, 3.0, 4.0 / n, 2.0 * math.sqrt(p / n)
    h = np.asarray(infl.leverage, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        high = h > lev_cut
        one = h > LEVERAGE_ONE
        resid = np.abs(np.asarray(infl.studentized_residual, dtype=np.float64)) > res_cut
        cooks = np.asarray(infl.cooks_distance, dtype=np.float64) > cooks_cut
        dffits = np.abs(np.asarray(infl.dffits, dtype=np.float64)) > dffits_cut
    marked = high | one | resid | cooks | dffits
    if designed is not None and n > p:
        from sitegen.stats.distributions import f_ppf  # noqa: PLC0415

        with np.errstate(invalid="ignore"):
            strong = np.asarray(infl.cooks_distance, dtype=np.float64) > f_ppf(0.5, p, n - p)
        marked &= ~np.asarray(designed, dtype=bool) | resid | one | strong
    rows = np.flatnonzero(marked)
    return PointFlags(
        high_leverage=high,
        leverage_one=one,
        large_residual=resid,
        large_cooks=cooks,
        large_dffits=dffits,
        leverage_cutoff=lev_cut,
        residual_cutoff=res_cut,
        cooks_cutoff=cooks_cut,
        dffits_cutoff=dffits_cut,
        rows=tuple(rows.tolist()),
        marked=marked,
    )
