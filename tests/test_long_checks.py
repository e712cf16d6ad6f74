"""Breusch–Pagan and RESET on long fits, whose auxiliary regressions are factored block by block.

Above ``BLOCKS_ABOVE_ROWS`` rows the checks build the R factor of [Z | e²] and [X | z² | z³ | y] a block at
a time (sitegen.stats.rowsqr, the same update a file read in chunks uses) instead of holding the tall
matrices, so that a 10 M-row fit does not need several hundred bytes per row for them. The statistics
must stay what statsmodels computes from the whole matrices (``het_breuschpagan`` in its robust form,
``linear_reset(power=3, use_f=True)``, and a weighted ``compare_f_test`` for RESET with weights), as the
shorter fits in tests/test_checks.py are checked; here on 300,001 rows. statsmodels forms RESET's F from
the difference of two residual sums of squares near 3e5 whose difference is near 0.1, and so keeps only about
9 digits; the hand computation beside it (numpy, double precision) takes the explained part directly, as the
projections of the residuals on the new columns once the design is taken out of them, and keeps about 12.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.stats.diagnostic import het_breuschpagan, linear_reset

from sitegen.stats import checks
from sitegen.stats.checks import Check, model_checks
from sitegen.stats.influence import influence

N = 300_001


def _run(X: np.ndarray, y: np.ndarray, terms: tuple[str, ...], weights: np.ndarray | None = None) -> dict[str, Check]:
    sw = np.ones(len(y)) if weights is None else np.sqrt(weights)
    Xw = X * sw[:, None]
    q = np.linalg.qr(Xw)[0]
    beta = np.linalg.lstsq(Xw, y * sw, rcond=None)[0]
    fitted = X @ beta
    e = y - fitted
    infl = influence(q, e, X.shape[0] - X.shape[1], weights=weights)
    found = model_checks(
        X, y, e, fitted, terms=terms, has_intercept="Intercept" in terms, infl=infl, alpha=0.05, weights=weights
    )
    return {c.check: c for c in found}


def _reset_by_hand(X: np.ndarray, y: np.ndarray, w: np.ndarray | None = None) -> float:
    """RESET's F without cancellation: ‖Q₂'r‖² for Q₂ the new columns' part of the QR of [X | ŷ² | ŷ³]."""
    s = np.ones(len(y)) if w is None else np.sqrt(w)
    Xw, yw = X * s[:, None], y * s
    beta = np.linalg.lstsq(Xw, yw, rcond=None)[0]
    r = yw - Xw @ beta
    f = X @ beta
    q = np.linalg.qr(np.column_stack([Xw, s * f**2, s * f**3]))[0][:, X.shape[1] :]
    extra = float(np.sum((q.T @ r) ** 2))
    df = len(y) - X.shape[1] - 2
    return float((extra / 2) / ((float(r @ r) - extra) / df))


def _data(seed: int, *, bend: float = 0.0, spread: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.uniform(1.0, 50.0, N)
    y = 2.0 + 0.8 * x + bend * x**2 + rng.normal(0.0, 1.0 + spread * x, N)
    return x, y


def test_the_long_fits_here_take_the_block_path() -> None:
    assert checks.BLOCKS_ABOVE_ROWS < N
    assert N % checks.BLOCK_ROWS != 0  # a short last block is part of the test


@pytest.mark.parametrize(("bend", "spread"), [(0.0, 0.0), (0.002, 0.05)])
def test_long_breusch_pagan_and_reset_match_statsmodels(bend: float, spread: float) -> None:
    x, y = _data(11, bend=bend, spread=spread)
    X = np.column_stack([np.ones(N), x])
    got = _run(X, y, ("Intercept", "x"))
    res = sm.OLS(y, X).fit()
    lm, p, _, _ = het_breuschpagan(res.resid, X)
    bp = got["constant_variance"]
    assert bp.statistic == pytest.approx(lm, rel=1e-9)
    assert bp.p_value == pytest.approx(p, rel=1e-7, abs=1e-300)
    assert bp.flag == (spread > 0)
    ref = linear_reset(res, power=3, use_f=True)
    reset = got["curvature"]
    assert reset.statistic == pytest.approx(float(ref.fvalue), rel=1e-8)
    assert reset.p_value == pytest.approx(float(ref.pvalue), rel=1e-6, abs=1e-300)
    assert reset.statistic == pytest.approx(_reset_by_hand(X, y), rel=1e-11)
    assert reset.flag == (bend > 0)


def test_long_weighted_reset_matches_a_weighted_f_test() -> None:
    x, y = _data(12, bend=0.001, spread=0.04)
    w = 1.0 / (1.0 + 0.04 * x) ** 2
    X = np.column_stack([np.ones(N), x])
    got = _run(X, y, ("Intercept", "x"), weights=w)["curvature"]
    small = sm.WLS(y, X, weights=w).fit()
    big = sm.WLS(y, np.column_stack([X, small.fittedvalues**2, small.fittedvalues**3]), weights=w).fit()
    f, p, _ = big.compare_f_test(small)
    assert got.statistic == pytest.approx(f, rel=1e-8)
    assert got.p_value == pytest.approx(p, rel=1e-6, abs=1e-300)
    assert got.statistic == pytest.approx(_reset_by_hand(X, y, w), rel=1e-11)


def test_long_fit_without_intercept_gets_a_constant_in_breusch_pagan() -> None:
    x, y = _data(13, spread=0.03)
    y = y - 2.0
    X = x[:, None]
    got = _run(X, y, ("x",))["constant_variance"]
    e = y - X @ np.linalg.lstsq(X, y, rcond=None)[0]
    lm, p, _, _ = het_breuschpagan(e, sm.add_constant(X))
    assert got.statistic == pytest.approx(lm, rel=1e-9)
    assert got.p_value == pytest.approx(p, rel=1e-7, abs=1e-300)
