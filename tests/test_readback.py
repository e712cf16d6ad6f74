"""Calibration read-back, weighting choice and Mandel's linearity test against independent computations.

Sources named beside each check:

- statsmodels WLS/OLS fits as the independent weighted line for the read-back and the
  Σ|%RE| weighting criterion (Almeida, Castel-Branco & Falcão 2002; from memory);
- statsmodels ``anova_lm`` of the nested straight and quadratic fits for Mandel's PG
  statistic (the same F for one added term), and ``scipy.stats.f.ppf(0.99, 1, N − 3)``
  for the critical value ISO 8466-1 uses (99 %; from memory);
- the fluorescence calibration worked example in tests/data/textbook (Miller & Miller),
  whose straight line the book treats as adequate.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from sitegen.errors import FitError
from sitegen.stats.readback import (
    candidate_weightings,
    choose_weighting,
    mandel_test,
    read_back,
    weights_for,
)

DATA = Path(__file__).parent / "data" / "textbook"


def _standards(seed: int, cv: float = 0.04) -> tuple[np.ndarray, np.ndarray]:
    """Invented standards: three replicates at six levels, scatter proportional to the level."""
    rng = np.random.default_rng(seed)
    x = np.repeat([0.5, 1.0, 2.0, 5.0, 10.0, 20.0], 3)
    y = (0.02 + 0.85 * x) * (1 + rng.normal(0, cv, x.size))
    return x, y


def test_read_back_per_level_with_replicates() -> None:
    x, y = _standards(1)
    rb = read_back(x, y, intercept=0.02, slope=0.85)
    assert [r.nominal for r in rb] == [0.5, 1.0, 2.0, 5.0, 10.0, 20.0]
    assert all(r.replicates == 3 for r in rb)
    for r in rb:
        found = (y[x == r.nominal] - 0.02) / 0.85
        assert r.found_each == pytest.approx(tuple(found), rel=1e-14)
        assert r.found == pytest.approx(found.mean(), rel=1e-14)
        assert r.percent == pytest.approx(100 * (found.mean() - r.nominal) / r.nominal, rel=1e-12)
    zero = read_back(np.array([0.0, 0.0, 1.0]), np.array([0.1, 0.0, 1.0]), intercept=0.0, slope=1.0)
    assert math.isnan(zero[0].percent)
    assert zero[0].deviation == pytest.approx(0.05)
    with pytest.raises(FitError, match="flat"):
        read_back(x, y, intercept=0.0, slope=0.0)


def test_weighting_choice_against_statsmodels_wls() -> None:
    sm = pytest.importorskip("statsmodels.api")
    x, y = _standards(4)
    choice = choose_weighting(x, y)
    assert [o.weighting for o in choice.options] == ["none", "1/x", "1/x²"]
    X = sm.add_constant(x)
    totals = {}
    for name, w in (("none", np.ones_like(x)), ("1/x", 1 / x), ("1/x²", 1 / x**2)):
        a, b = sm.WLS(y, X, weights=w).fit().params
        totals[name] = float(np.abs(100 * ((y - a) / b - x) / x).sum())
        option = next(o for o in choice.options if o.weighting == name)
        assert (option.intercept, option.slope) == pytest.approx((a, b), rel=1e-10)
        assert option.sum_abs_percent == pytest.approx(totals[name], rel=1e-10)
    assert choice.chosen == min(totals, key=lambda k: totals[k])
    # Proportional scatter: a weighted line reads the low standards back far better.
    assert choice.chosen != "none"
    assert choice.chosen in choice.reason


def test_weighting_choice_when_x_can_be_zero() -> None:
    x, y = _standards(5)
    x = np.concatenate([[0.0, 0.0], x])
    y = np.concatenate([[0.03, 0.01], y])
    assert candidate_weightings(x, y) == ("none", "1/y²")
    choice = choose_weighting(x, y)
    assert {o.weighting for o in choice.options} == {"none", "1/y²"}
    w = weights_for("1/y²", x, y)
    assert w is not None
    assert w == pytest.approx(1 / y**2)
    with pytest.raises(FitError, match="above zero"):
        weights_for("1/x", x, y)
    assert candidate_weightings(np.array([0.0, 1.0, 2.0]), np.array([0.0, 1.0, 2.0])) == ("none",)


def test_mandel_against_statsmodels_nested_anova() -> None:
    sm = pytest.importorskip("statsmodels.api")
    from statsmodels.stats.anova import anova_lm

    rng = np.random.default_rng(8)
    x = np.repeat(np.linspace(1, 10, 8), 2)
    for curve, expect_linear in ((0.0, True), (0.04, False)):
        y = 0.1 + 1.0 * x - curve * x**2 + rng.normal(0, 0.05, x.size)
        t = mandel_test(x, y)
        lin = sm.OLS(y, sm.add_constant(x)).fit()
        quad = sm.OLS(y, np.column_stack([np.ones_like(x), x, x**2])).fit()
        table = anova_lm(lin, quad)
        assert t.statistic == pytest.approx(table["F"].iloc[1], rel=1e-8)
        assert t.p_value == pytest.approx(table["Pr(>F)"].iloc[1], rel=1e-6)
        assert t.critical == pytest.approx(stats.f.ppf(0.99, 1, x.size - 3), rel=1e-10)
        assert t.linear is expect_linear
    with pytest.raises(FitError, match="3 or more levels"):
        mandel_test(np.array([1.0, 1.0, 2.0, 2.0]), np.array([1.0, 1.1, 2.0, 2.1]))


def test_mandel_weighted_against_statsmodels_wls() -> None:
    sm = pytest.importorskip("statsmodels.api")
    x, y = _standards(9)
    w = 1 / x**2
    t = mandel_test(x, y, w)
    lin = sm.WLS(y, sm.add_constant(x), weights=w).fit()
    quad = sm.WLS(y, np.column_stack([np.ones_like(x), x, x**2]), weights=w).fit()
    pg = (lin.ssr - quad.ssr) / (quad.ssr / (x.size - 3))
    assert t.statistic == pytest.approx(pg, rel=1e-8)


def test_mandel_on_textbook_fluorescence_line() -> None:
    import csv

    with (DATA / "fluorescence_calibration.csv").open() as fh:
        rows = list(csv.reader(fh))
    x = np.array([float(r[0]) for r in rows[1:]])
    y = np.array([float(r[1]) for r in rows[1:]])
    # Miller & Miller treat this line as straight; Mandel's test agrees (PG checked against numpy polyfit).
    t = mandel_test(x, y)
    r1 = y - np.polyval(np.polyfit(x, y, 1), x)
    r2 = y - np.polyval(np.polyfit(x, y, 2), x)
    pg = (r1 @ r1 - r2 @ r2) / (r2 @ r2 / (x.size - 3))
    assert t.statistic == pytest.approx(pg, rel=1e-8)
    assert t.linear
