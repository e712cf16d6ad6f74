"""sitegen's published figures for a NIST StRD set, and their correct digits against the mpmath reference.

Shared by tests/test_nist_figures.py (which asserts the digits) and bench/nist_digits.py
(which prints the table). The figures are taken as the build publishes them: the fit
from ``fit_ols``, everything else from ``derive.compute`` (observations.csv's columns,
the diagnostics' statistics and p-values), for one arithmetic forced by ``ext.forced``.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
from nist_data import load_nist
from nist_reference import Reference, reference

from sitegen import derive
from sitegen.formula import build_design
from sitegen.model import Diagnostic
from sitegen.spec import DatasetSpec
from sitegen.stats import ext
from sitegen.stats.checks import Check, vif
from sitegen.stats.influence import influence
from sitegen.stats.ols import OlsFit, fit_ols

LRE_CAP = 15.0
#: Per-row values smaller than this fraction of the column's largest are compared on that scale.
ROW_FLOOR = 1e-6
KINDS = (ext.LONG_DOUBLE, ext.DOUBLE_DOUBLE)
#: Diagnostic name → (statistic key, p-value key) in the reference.
DIAGNOSTICS = {
    "constant_variance": ("breusch_pagan", "breusch_pagan_p"),
    "independence": ("durbin_watson", "durbin_watson_p"),
    "curvature": ("reset_f", "reset_p"),
    "lack_of_fit": ("lack_of_fit_f", "lack_of_fit_p"),
    "normality_jarque_bera": ("jarque_bera", "jarque_bera_p"),
    "normality_shapiro": ("shapiro_w", "shapiro_p"),
}
OBSERVATION_COLUMNS = (
    "fitted",
    "residual",
    "leverage",
    "studentized_residual",
    "cooks_distance",
    "dffits",
    "mean_ci_low",
    "mean_ci_high",
    "pred_low",
    "pred_high",
)


_ESCALATED: set[str] = set()


def escalated() -> list[str]:
    """The sets whose long-double fit was made again in double-double so far."""
    return sorted(_ESCALATED)


def program_figures(name: str, kind: str) -> dict[str, Any]:
    """Every figure sitegen publishes for NIST set ``name`` in arithmetic ``kind``."""
    case = load_nist(name)
    frame = pd.read_csv(case.csv_path)
    frame.index = pd.RangeIndex(1, len(frame) + 1)
    with ext.forced(kind):
        design = build_design(case.formula, frame, f"{name}.csv")
        fit = fit_ols(design.X_ext, design.y_ext, design.terms, has_intercept=design.has_intercept, level=0.95)
        if ext.needs_double_double(fit.condition):  # as sitegen.analyze does
            _ESCALATED.add(name)
            return program_figures(name, ext.DOUBLE_DOUBLE)
        derived = derive.compute(design, fit, DatasetSpec(robust=True), None)
        infl = influence(fit.q, fit.resid, fit.df_resid)
        out: dict[str, Any] = {
            "coefficients": fit.beta,
            "std_errors": fit.std_error,
            "t_stat": fit.t_stat,
            "residual_sd": fit.sigma,
            "r_squared": fit.r_squared,
            "adj_r_squared": fit.adj_r_squared,
            "f_stat": fit.f_stat,
            "f_p_value": fit.f_p_value,
            "condition_number": fit.condition,
            "standardized_residual": infl.standardized_residual,
        }
        obs = dict(zip(derived.observations.columns, derived.observations.values, strict=True))
        out |= {c: np.asarray(obs[c], dtype=float) for c in OBSERVATION_COLUMNS}
        if derived.robust_se is not None:
            out["hc3_std_errors"] = derived.robust_se
        published: list[Check | Diagnostic] = [*derived.diagnostics, *_normality_tests(design, fit, infl)]
        for d in published:
            if d.check in DIAGNOSTICS:
                stat_key, p_key = DIAGNOSTICS[d.check]
                out[stat_key], out[p_key] = d.statistic, d.p_value
        if design.has_intercept and len(design.terms) >= 3:
            out["vif"] = vif(design.X, 0, xtx_inv=fit.xtx_inv, X_ext=design.X_ext)
            collinearity = next(d for d in derived.diagnostics if d.check == "collinearity")
            out["largest_vif"] = collinearity.statistic
    return out


def _normality_tests(design: Any, fit: OlsFit, infl: Any) -> tuple[Check, ...]:
    """Both normality tests as the checks compute them, before the page shows them as one check
    (Shapiro–Wilk's figures are also the merged check's; Jarque–Bera's only appear in its text)."""
    checks = derive.fit_checks(design, fit, infl)
    return tuple(c for c in checks if c.check.startswith("normality_"))


def fitted_for(name: str, kind: str) -> OlsFit:
    """The fit of NIST set ``name`` as the build makes it in arithmetic ``kind`` (escalation included)."""
    case = load_nist(name)
    frame = pd.read_csv(case.csv_path)
    frame.index = pd.RangeIndex(1, len(frame) + 1)
    with ext.forced(kind):
        design = build_design(case.formula, frame, f"{name}.csv")
        fit = fit_ols(design.X_ext, design.y_ext, design.terms, has_intercept=design.has_intercept, level=0.95)
    if kind == ext.LONG_DOUBLE and fit.condition > ext.DOUBLE_DOUBLE_CONDITION:
        return fitted_for(name, ext.DOUBLE_DOUBLE)
    return fit


def _lre(got: float, want: float, scale: float) -> float:
    if math.isnan(want) and math.isnan(got):
        return LRE_CAP
    if got == want:
        return LRE_CAP
    if not (math.isfinite(got) and math.isfinite(want)) or scale == 0:
        return 0.0
    return min(LRE_CAP, -math.log10(abs(got - want) / scale))


def digits(got: Any, want: Any) -> float:
    """Correct significant digits of ``got`` (log relative error, capped at 15); for a per-row
    column the least over its rows, each row measured against max(|value|, ROW_FLOOR · largest)."""
    if got is None:
        return 0.0
    if isinstance(want, list):
        g = np.asarray(got, dtype=float)
        w = np.asarray(want, dtype=float)
        if g.shape != w.shape:
            return 0.0
        big = float(np.max(np.abs(w))) if w.size else 0.0
        return min(
            (_lre(float(a), float(b), max(abs(float(b)), ROW_FLOOR * big)) for a, b in zip(g, w, strict=True)),
            default=LRE_CAP,
        )
    return _lre(float(got), float(want), abs(float(want)))


def digits_by_quantity(name: str, kind: str) -> dict[str, float]:
    """Correct digits of every figure the reference has for set ``name``."""
    ref: Reference = reference(name)
    ours = program_figures(name, kind)
    wanted: dict[str, Any] = {**ref.scalars, **ref.rows}
    if "vif" in ref.rows:
        wanted["largest_vif"] = max(ref.rows["vif"])
    # A diagnostic that sitegen deliberately does not judge on this set (lack of fit with too few repeated
    # settings; Jarque–Bera where Shapiro–Wilk decides normality) publishes no figure: nothing to compare.
    # Every other figure must be there (a missing one counts as no correct digit).
    optional = {key for pair in DIAGNOSTICS.values() for key in pair}
    return {
        key: digits(ours.get(key), want)
        for key, want in wanted.items()
        if not (key in optional and ours.get(key) is None)
    }
