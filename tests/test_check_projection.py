"""Breusch–Pagan and RESET taken on the fit's own extended-precision Q (sitegen.stats.checks) against the same
statistics in 50-digit mpmath arithmetic.

Reference: Koenker's studentized Breusch–Pagan, n·R² of e² on [1, x] (as statsmodels' ``het_breuschpagan``),
and Ramsey's RESET with the squared and cubed centred, scaled fitted values, each computed by its textbook
formula from the normal equations in mpmath (tests/nist_reference.py's ``_solve``/``_ssr``), independent of
sitegen's solver. The data are invented straight lines with even scatter, where Breusch–Pagan's R² is small:
there R² = 1 − SSR/TSS, a difference of nearly equal sums, kept only some 11 to 14 digits (measured: 10.6 at
LM ≈ 8e-5), while the explained part taken directly keeps the full float64 figure.
"""

from __future__ import annotations

import math
from typing import Any

import mpmath as mp
import numpy as np
import pandas as pd
import pytest
from nist_reference import _solve, _ssr

from sitegen.derive import fit_checks
from sitegen.formula import build_design
from sitegen.stats import ext
from sitegen.stats.influence import influence
from sitegen.stats.ols import fit_ols

SEEDS = range(8)


def _line(seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = np.round(rng.uniform(0, 10, 40), 3)
    return x, np.round(1 + 0.5 * x + rng.normal(0, 0.3, 40), 4)


def _reference(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """(Breusch–Pagan LM, RESET F) in 50-digit mpmath."""
    with mp.workdps(50):
        n = len(x)
        X = [[mp.mpf(1), mp.mpf(float(v))] for v in x]
        Y = [mp.mpf(float(v)) for v in y]
        beta, _ = _solve(X, Y)
        fitted = [beta[0] + beta[1] * row[1] for row in X]
        e = [Y[i] - fitted[i] for i in range(n)]
        u = [v * v for v in e]
        ubar = mp.fsum(u) / n
        lm = n * (1 - _ssr(X, u) / mp.fsum((v - ubar) ** 2 for v in u))
        fbar = mp.fsum(fitted) / n
        z = [v - fbar for v in fitted]
        top = max(abs(v) for v in z)
        z = [v / top for v in z]
        ssr = mp.fsum(v * v for v in e)
        rest = _ssr([[*X[i], z[i] ** 2, z[i] ** 3] for i in range(n)], Y)
        return float(lm), float(((ssr - rest) / 2) / (rest / (n - 4)))


def _ours(x: np.ndarray, y: np.ndarray, kind: str) -> tuple[Any, Any]:
    """(Breusch–Pagan LM, RESET F) as the build computes them, in arithmetic ``kind``."""
    frame = pd.DataFrame({"x": x, "y": y}, index=pd.RangeIndex(1, len(x) + 1))
    with ext.forced(kind):
        design = build_design("y ~ x", frame, "line.csv")
        fit = fit_ols(design.X_ext, design.y_ext, design.terms, has_intercept=True, level=0.95)
        assert fit.q_ext is not None  # a small design keeps its extended Q
        checks = fit_checks(design, fit, influence(fit.q, fit.resid, fit.df_resid))
    by_name = {c.check: c for c in checks}
    return by_name["constant_variance"].statistic, by_name["curvature"].statistic


def _digits(got: float, want: float) -> float:
    return 16.0 if got == want else -math.log10(abs(got - want) / abs(want))


@pytest.mark.parametrize("kind", [ext.LONG_DOUBLE, ext.DOUBLE_DOUBLE])
def test_breusch_pagan_and_reset_keep_the_float64_figure(kind: str) -> None:
    worst = {"breusch_pagan": 16.0, "reset": 16.0}
    smallest_lm = math.inf
    for seed in SEEDS:
        x, y = _line(seed)
        lm_ref, f_ref = _reference(x, y)
        lm, f = _ours(x, y, kind)
        smallest_lm = min(smallest_lm, lm_ref)
        worst["breusch_pagan"] = min(worst["breusch_pagan"], _digits(lm, lm_ref))
        worst["reset"] = min(worst["reset"], _digits(f, f_ref))
    assert smallest_lm < 1e-3  # the hard case is among them: R² below 1e-4
    assert worst["breusch_pagan"] >= 15.0, worst
    assert worst["reset"] >= 15.0, worst
