"""Passing–Bablok: the cusum test's critical value, and the bias interval above the bootstrap's reach.

Independent sources beside each check:
* ``scipy.stats.kstwobign`` (the limiting Kolmogorov–Smirnov distribution) for h_γ of the cusum test; the
  paper (Passing & Bablok 1983) tabulates 1.36 at 5 % and 1.63 at 1 % (as printed; from memory), which the
  quantiles round to;
* the counts l and L of the cusum test recounted here from the residuals;
* a coverage simulation of the rank-based bias interval used above 250 pairs (a known true line, errors in
  both methods), and the bootstrap (itself checked in tests/test_comparison_stats.py) on the same data for
  its width.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from conftest import cli, fit_json, write_csv, write_toml
from scipy import stats

from sitegen.stats.bias import bias_at
from sitegen.stats.passing_bablok import (
    BOOTSTRAP_MAX_POINTS,
    bootstrap_values,
    kolmogorov_cdf,
    kolmogorov_quantile,
    passing_bablok,
    rank_value_interval,
)


@pytest.mark.parametrize("p", [0.05, 0.2, 0.5, 0.8, 0.9, 0.95, 0.975, 0.99, 0.995, 0.999])
def test_kolmogorov_quantile_against_scipy(p: float) -> None:
    assert kolmogorov_quantile(p) == pytest.approx(stats.kstwobign.ppf(p), rel=1e-12)
    h = stats.kstwobign.ppf(p)
    assert kolmogorov_cdf(h) == pytest.approx(p, rel=1e-12)


def test_kolmogorov_quantiles_round_to_the_papers_table() -> None:
    assert round(kolmogorov_quantile(0.95), 2) == 1.36
    assert round(kolmogorov_quantile(0.99), 2) == 1.63


@pytest.mark.parametrize("level", [0.9, 0.95, 0.99])
def test_cusum_critical_value_is_the_kolmogorov_quantile_times_root_l_plus_one(level: float) -> None:
    x = np.linspace(1, 30, 40)
    y = 0.02 * x**2 + 0.5 * x
    pb = passing_bablok(x, y, level=level)
    below = int(np.sum(y < pb.intercept + pb.slope * x))  # L, the points below the line
    assert pb.cusum_critical == pytest.approx(stats.kstwobign.ppf(level) * math.sqrt(below + 1), rel=1e-12)


def _pairs(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    truth = rng.uniform(0.5, 6.0, n)
    return truth + rng.normal(0, 0.15, n), 0.1 + 1.05 * truth + rng.normal(0, 0.15, n)


def test_rank_value_interval_covers_the_true_line_and_is_wider_than_the_bootstrap() -> None:
    rng = np.random.default_rng(11)
    at = np.array([1.0, 4.0])
    true = 0.1 + 1.05 * at
    runs, covered = 120, 0
    for _ in range(runs):
        x, y = _pairs(rng, 300)
        low, high = rank_value_interval(x, y, at, level=0.95)
        covered += int(np.all((low <= true) & (true <= high)))
    assert covered / runs >= 0.93  # both levels at once; Bonferroni makes it conservative (measured: 1.0)
    # on a comparison small enough for the bootstrap, the rank interval is the wider (conservative) one
    x, y = _pairs(rng, 200)
    low, high = rank_value_interval(x, y, at, level=0.95)
    b_low, b_high = bootstrap_values(x, y, at, level=0.95)
    assert np.all(high - low > b_high - b_low)
    assert np.all(high - low < 3 * (b_high - b_low))


def test_bias_above_the_bootstrap_limit_comes_from_the_rank_interval() -> None:
    rng = np.random.default_rng(5)
    x, y = _pairs(rng, BOOTSTRAP_MAX_POINTS + 50)
    found = bias_at(x, y, [1.0, 4.0], method="passing_bablok", level=0.95)
    low, high = rank_value_interval(x, y, np.array([1.0, 4.0]), level=0.95)
    pb = passing_bablok(x, y, level=0.95)
    for b, at, lo, hi in zip(found, (1.0, 4.0), low, high, strict=True):
        assert b.estimate == pytest.approx(pb.intercept + (pb.slope - 1) * at, rel=1e-12)
        assert (b.ci_low, b.ci_high) == pytest.approx((lo - at, hi - at), rel=1e-12)
        assert b.ci_low <= b.estimate <= b.ci_high


def test_a_large_comparison_gets_its_passing_bablok_bias_and_says_how(tmp_path: Path) -> None:
    rng = np.random.default_rng(3)
    x, y = _pairs(rng, 400)
    data = tmp_path / "data"
    write_csv(data / "big.csv", [("lab", "kit"), *((f"{a:.4f}", f"{b:.4f}") for a, b in zip(x, y, strict=True))])
    write_toml(data / "big.toml", {"purpose": "comparison", "model": "kit ~ lab", "decision_levels": [1.0, 4.0]})
    site = tmp_path / "site"
    assert cli("build", data, "-o", site, "-j", "1").code == 0
    fit = fit_json(site, "big")
    assert [b["line"] for b in fit["bias"]] == ["passing_bablok", "passing_bablok"]
    xs, ys = np.round(x, 4), np.round(y, 4)
    low, high = rank_value_interval(xs, ys, np.array([1.0, 4.0]), level=0.95)
    for b, at, lo, hi in zip(fit["bias"], (1.0, 4.0), low, high, strict=True):
        assert (b["ci_low"], b["ci_high"]) == pytest.approx((lo - at, hi - at), rel=1e-9)
    page = (site / "datasets" / "big" / "index.html").read_text(encoding="utf-8")
    assert "Bonferroni" in page
    assert "limited to 250 pairs" not in page
