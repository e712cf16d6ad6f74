"""Rows grouped by predictor setting a chunk at a time (sitegen/stats/repeats.py), against pandas' groupby as
the independent computation, and the lack-of-fit F it feeds against statsmodels' ANOVA of the line against
the cell means (the textbook form of the test: the full model is one mean per setting)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.formula.api import ols
from statsmodels.stats.anova import anova_lm

from sitegen.stats.checks import lack_of_fit_outcome
from sitegen.stats.repeats import MAX_SETTINGS, Repeats


def _fed(settings: np.ndarray, y: np.ndarray, chunk: int) -> Repeats:
    acc = Repeats()
    for lo in range(0, len(y), chunk):
        acc.add(settings[lo : lo + chunk], y[lo : lo + chunk])
    return acc


@pytest.mark.parametrize("chunk", [1, 7, 1000, 10_000])
def test_pure_error_equals_pandas_groupby_whatever_the_chunks(chunk: int) -> None:
    rng = np.random.default_rng(3)
    n = 5000
    a = rng.integers(-5, 6, n).astype(float)
    a[a == 0] = np.where(rng.random(int((a == 0).sum())) < 0.5, -0.0, 0.0)  # −0.0 is the setting 0.0
    b = rng.integers(0, 4, n).astype(float)
    y = 1e3 + rng.normal(0.0, 0.01, n)  # a large mean with a small spread: no Σy² − (Σy)²/n cancellation
    frame = pd.DataFrame({"a": a + 0.0, "b": b, "y": y})
    groups = frame.groupby(["a", "b"])["y"]
    expected_ss = float(groups.apply(lambda v: float(((v - v.mean()) ** 2).sum())).sum())
    sizes = groups.size()
    got = _fed(np.column_stack([a, b]), y, chunk).pure_error()
    assert got is not None
    assert got.settings == len(sizes)
    assert got.repeated == int((sizes > 1).sum())
    assert got.ss == pytest.approx(expected_ss, rel=1e-11)
    one = _fed(a, y, chunk).pure_error()  # one predictor: the values themselves are the keys
    assert one is not None
    assert one.settings == frame["a"].nunique() == 11


def test_repeated_keys_are_the_settings_measured_more_than_once() -> None:
    x = np.array([3.0, 1.0, 2.0, 3.0, 5.0, 1.0, 1.0])
    acc = _fed(x, np.arange(7.0), 2)
    keys = acc.repeated_keys()
    assert keys is not None
    assert keys.tolist() == [1.0, 3.0]


def test_too_many_settings_are_given_up_and_say_so() -> None:
    x = np.arange(MAX_SETTINGS + 10, dtype=float)
    acc = _fed(x, np.zeros_like(x), 50_000)
    assert acc.pure_error() is None
    assert acc.repeated_keys() is None
    assert acc.keys is None  # nothing is kept once given up


def test_lack_of_fit_from_grouped_rows_matches_statsmodels_anova_against_cell_means() -> None:
    rng = np.random.default_rng(8)
    x = np.repeat(np.arange(8.0), 6)
    y = 1.0 + 0.4 * x + 0.05 * x**2 + rng.normal(0.0, 0.3, len(x))
    data = pd.DataFrame({"x": x, "y": y})
    line = ols("y ~ x", data).fit()
    table = anova_lm(line, ols("y ~ C(x)", data).fit())
    pure = _fed(x, y, 5).pure_error()
    assert pure is not None
    got = lack_of_fit_outcome(len(x), 2, pure, float(line.ssr), float(np.linalg.norm(y)))
    assert not isinstance(got, str)
    stat, p, text = got
    assert stat == pytest.approx(float(table["F"].iloc[1]), rel=1e-10)
    assert p == pytest.approx(float(table["Pr(>F)"].iloc[1]), rel=1e-8)
    assert "8 distinct settings" in text
