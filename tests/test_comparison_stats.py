"""Method comparison statistics against published examples and independent computations.

Sources named beside each check:

- Bland & Altman, Lancet 1986 (i:307–310), Table 1: peak expiratory flow rate (l/min) of
  17 people by a Wright peak flow meter and a mini Wright meter (first reading of each).
  The data and the printed results (mean difference −2.1, SD 38.8, limits −79.7 to 75.5
  computed as d̄ ± 2s, interval of the mean −22.1 to 17.9, SE of the limits 16.3, interval
  of the lower limit −114.3 to −45.1 and of the upper 40.9 to 110.1, t = 2.12 on 16 df)
  are given here FROM MEMORY of the paper; the recomputation below agrees with every one
  of them to the printed rounding, which is the check that memory served.
- Passing & Bablok 1983: an independent, loop-by-loop implementation of the published
  definition written in this file (no numpy vectorisation, no code shared with sitegen).
- statsmodels OLS ``get_prediction(...).conf_int()`` for the bias at decision levels; for the
  Passing–Bablok bias, the same bootstrap resamples refitted by the one-pair-at-a-time definition,
  and a coverage simulation with known truth.
- scipy.stats (t and normal quantiles, linregress) for the difference analysis and its trend.
"""

from __future__ import annotations

import itertools
import math
import statistics

import numpy as np
import pytest
from numpy.typing import NDArray
from scipy import stats

from sitegen.errors import FitError
from sitegen.stats.agreement import difference_analysis
from sitegen.stats.bias import bias_at
from sitegen.stats.passing_bablok import (
    BOOTSTRAP_MAX_POINTS,
    BOOTSTRAP_SEED,
    MAX_POINTS,
    bootstrap_values,
    passing_bablok,
)

Array = NDArray[np.float64]

# Bland & Altman 1986, Table 1 (from memory): Wright and mini Wright, first readings, l/min.
WRIGHT = [494, 395, 516, 434, 476, 557, 413, 442, 650, 433, 417, 656, 267, 478, 178, 423, 427]
MINI = [512, 430, 520, 428, 500, 600, 364, 380, 658, 445, 432, 626, 260, 477, 259, 350, 451]


def test_bland_altman_1986_worked_example() -> None:
    # The paper takes differences Wright − mini: y = Wright (test), x = mini (reference).
    a = difference_analysis(np.array(WRIGHT, float), np.array(MINI, float), level=0.95)
    assert a.n == 17
    assert round(a.mean_difference, 1) == -2.1
    assert round(a.sd_difference, 1) == 38.8
    assert round(a.limit_se, 1) == 16.3
    # Printed −22.1 to 17.9 (a half-width of 20.0 from rounded inputs): within 0.1 of ours.
    assert abs(a.mean_difference_ci_low - (-22.1)) < 0.1
    assert abs(a.mean_difference_ci_high - 17.9) < 0.1
    # The paper's limits use 2s: −79.7 and 75.5 as printed (from rounded d̄ and s).
    assert abs((a.mean_difference - 2 * a.sd_difference) - (-79.7)) < 0.1
    assert abs((a.mean_difference + 2 * a.sd_difference) - 75.5) < 0.1
    # Their intervals, worked from the printed (rounded) limits and SE as the paper does:
    # limit ± 2.12 × 16.3, printed −114.3 to −45.1 and 40.9 to 110.1.
    t16, se = 2.12, round(a.limit_se, 1)
    mean, sd = round(a.mean_difference, 1), round(a.sd_difference, 1)
    low, high = mean - 2 * sd, mean + 2 * sd
    assert (round(low, 1), round(high, 1)) == (-79.7, 75.5)
    assert (round(low - t16 * se, 1), round(low + t16 * se, 1)) == (-114.3, -45.1)
    assert (round(high - t16 * se, 1), round(high + t16 * se, 1)) == (40.9, 110.1)
    # Our limits use z = 1.96 at 95 %; interval half-width is t(16)·SE.
    half = a.limit_high_ci_high - a.limit_high
    assert half == pytest.approx(stats.t.ppf(0.975, 16) * 16.2846, rel=1e-4)


@pytest.mark.parametrize("level", [0.9, 0.95, 0.99])
def test_difference_analysis_against_numpy_and_scipy(level: float) -> None:
    rng = np.random.default_rng(7)
    x = rng.uniform(2.0, 40.0, 35)
    y = 0.3 + 1.04 * x + rng.normal(0.0, 0.8, 35)
    a = difference_analysis(y, x, level=level)
    d = y - x
    n = d.size
    t = stats.t.ppf(0.5 + level / 2, n - 1)
    z = stats.norm.ppf(0.5 + level / 2)
    s = np.std(d, ddof=1)
    assert a.mean_difference == pytest.approx(np.mean(d), rel=1e-13)
    assert a.sd_difference == pytest.approx(s, rel=1e-13)
    lo, hi = stats.t.interval(level, n - 1, loc=np.mean(d), scale=stats.sem(d))
    assert (a.mean_difference_ci_low, a.mean_difference_ci_high) == pytest.approx((lo, hi), rel=1e-10)
    assert a.limit_low == pytest.approx(np.mean(d) - z * s, rel=1e-12)
    assert a.limit_high == pytest.approx(np.mean(d) + z * s, rel=1e-12)
    se = math.sqrt(3 * s * s / n)
    assert a.limit_low_ci_low == pytest.approx(a.limit_low - t * se, rel=1e-10)
    assert a.limit_high_ci_high == pytest.approx(a.limit_high + t * se, rel=1e-10)
    # Trend: scipy's linregress of the differences on the means.
    reg = stats.linregress((x + y) / 2, d)
    assert a.trend_slope == pytest.approx(reg.slope, rel=1e-10)
    assert a.trend_p_value == pytest.approx(reg.pvalue, rel=1e-7)


def test_percent_scale_and_trend_flag() -> None:
    rng = np.random.default_rng(3)
    x = rng.uniform(1.0, 100.0, 60)
    y = x * (1.0 + rng.normal(0.0, 0.03, 60)) * 1.02  # scatter proportional to the level
    absolute = difference_analysis(y, x, level=0.95)
    percent = difference_analysis(y, x, level=0.95, scale="percent")
    p = 100 * (y - x) / ((x + y) / 2)
    assert percent.mean_difference == pytest.approx(np.mean(p), rel=1e-12)
    assert percent.sd_difference == pytest.approx(np.std(p, ddof=1), rel=1e-12)
    assert absolute.trend_flag  # the absolute differences grow with the level
    with pytest.raises(FitError, match="average zero"):
        difference_analysis(np.array([1.0, -2.0, 3.0]), np.array([-1.0, 2.0, 3.0]), level=0.95, scale="percent")


def test_difference_analysis_refuses_too_few_and_nonfinite() -> None:
    with pytest.raises(FitError, match="at least 3"):
        difference_analysis(np.array([1.0, 2.0]), np.array([1.0, 2.0]), level=0.95)
    with pytest.raises(FitError, match="finite"):
        difference_analysis(np.array([1.0, 2.0, np.nan]), np.array([1.0, 2.0, 3.0]), level=0.95)


# --- Passing–Bablok: the published definition written out independently ----------------------


def _pb_reference(xs: list[float], ys: list[float], level: float) -> dict[str, float]:
    """Passing & Bablok (1983) as the paper states it, one pair at a time."""
    n = len(xs)
    slopes: list[float] = []
    minus_one = 0
    for i, j in itertools.combinations(range(n), 2):
        dx = xs[j] - xs[i]
        dy = ys[j] - ys[i]
        if dx == 0 and dy == 0:
            continue  # 0/0: the pair gives no slope
        # a vertical pair's sign comes from the pair's own order
        s = (math.inf if dy > 0 else -math.inf) if dx == 0 else dy / dx
        if s == -1:
            minus_one += 1
            continue  # slopes of exactly −1 are left out
        slopes.append(s)
    slopes.sort()
    big_n = len(slopes)
    k = sum(1 for s in slopes if s < -1)
    odd = slopes[(big_n + 1) // 2 + k - 1]
    b = odd if big_n % 2 else (slopes[big_n // 2 + k - 1] + slopes[big_n // 2 + k]) / 2
    a = statistics.median([y - b * x for x, y in zip(xs, ys, strict=True)])
    c = stats.norm.ppf(0.5 + level / 2) * math.sqrt(n * (n - 1) * (2 * n + 5) / 18)
    m1 = math.floor((big_n - c) / 2 + 0.5)
    m2 = big_n - m1 + 1
    lo = slopes[m1 + k - 1]
    hi = slopes[m2 + k - 1]
    a_lo = statistics.median([y - hi * x for x, y in zip(xs, ys, strict=True)])
    a_hi = statistics.median([y - lo * x for x, y in zip(xs, ys, strict=True)])
    # cusum linearity statistic
    res = [y - a - b * x for x, y in zip(xs, ys, strict=True)]
    pos = sum(1 for r in res if r > 0)
    neg = sum(1 for r in res if r < 0)
    score = [math.sqrt(neg / pos) if r > 0 else (-math.sqrt(pos / neg) if r < 0 else 0.0) for r in res]
    dist = [(y + x / b - a) / math.sqrt(1 + 1 / b**2) for x, y in zip(xs, ys, strict=True)]
    order = sorted(range(n), key=lambda i: dist[i])
    run, worst = 0.0, 0.0
    for i in order:
        run += score[i]
        worst = max(worst, abs(run))
    neg_inf = sum(1 for s in slopes if s == -math.inf)
    return {
        "b": b,
        "a": a,
        "lo": lo,
        "hi": hi,
        "a_lo": a_lo,
        "a_hi": a_hi,
        "n_s": big_n,
        "k": k,
        "neg_inf": neg_inf,
        "minus_one": minus_one,
        "cusum": worst,
    }


def _check_pb(x: list[float], y: list[float], level: float = 0.95) -> dict[str, float]:
    ref = _pb_reference(x, y, level)
    pb = passing_bablok(np.array(x), np.array(y), level=level)
    assert pb.slopes_used == ref["n_s"]
    # sitegen takes every vertical pair as +∞; the reference by the pair's order: K differs by the −∞ ones.
    assert pb.slopes_below_minus_one == ref["k"] - ref["neg_inf"]
    assert pb.slope == pytest.approx(ref["b"], rel=1e-12, abs=1e-12)
    assert pb.intercept == pytest.approx(ref["a"], rel=1e-12, abs=1e-12)
    assert pb.slope_ci_low == pytest.approx(ref["lo"], rel=1e-12)
    assert pb.slope_ci_high == pytest.approx(ref["hi"], rel=1e-12)
    assert pb.intercept_ci_low == pytest.approx(ref["a_lo"], rel=1e-12, abs=1e-12)
    assert pb.intercept_ci_high == pytest.approx(ref["a_hi"], rel=1e-12, abs=1e-12)
    assert pb.cusum_max == pytest.approx(ref["cusum"], rel=1e-12, abs=1e-12)
    return ref


@pytest.mark.parametrize("n", [30, 31, 45])
def test_passing_bablok_matches_the_definition(n: int) -> None:
    rng = np.random.default_rng(n)
    truth = rng.uniform(1.0, 50.0, n)
    x = (truth + rng.normal(0, 1.0, n)).tolist()
    y = (0.5 + 1.05 * truth + rng.normal(0, 1.2, n)).tolist()
    _check_pb(x, y)


def test_passing_bablok_even_and_odd_slope_counts() -> None:
    base_x = [1.0, 2.0, 3.5, 4.0, 5.5, 7.0, 8.0, 9.5, 11.0, 12.0, 13.5, 15.0]
    base_y = [1.2, 2.1, 3.3, 4.4, 5.4, 7.3, 7.9, 9.9, 11.2, 12.5, 13.3, 15.6]
    counts = set()
    for drop in range(4):
        x = base_x[drop:]
        y = base_y[drop:]
        counts.add(_check_pb(x, y)["n_s"] % 2)
    assert counts == {0, 1}  # both parities were exercised


def test_passing_bablok_ties_minus_one_and_identical_points() -> None:
    # Tied x with different y (vertical pairs), identical points (0/0), and pairs of slope exactly −1.
    x = [1.0, 2.0, 2.0, 3.0, 4.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0, 3.0, 6.0]
    y = [1.1, 1.9, 2.3, 3.0, 4.2, 4.2, 5.1, 5.8, 7.2, 8.1, 8.8, 10.3, 4.0, 4.0]
    ref = _check_pb(x, y)
    assert ref["neg_inf"] >= 1  # a vertical pair came out as −∞ in the reference, and still agrees
    # Points (3, 4.0) and (4, 3.0) would give exactly −1: check it is left out.
    x2 = [*x, 4.0]
    y2 = [*y, 3.0]
    ref2 = _check_pb(x2, y2)
    assert ref2["minus_one"] >= 1


def test_passing_bablok_shuffle_invariant_and_sign_convention_immaterial() -> None:
    rng = np.random.default_rng(11)
    x = np.round(rng.uniform(1, 20, 40), 0)  # many tied x values
    y = np.round(x * 1.1 + rng.normal(0, 1, 40), 1)
    first = passing_bablok(x, y, level=0.95)
    perm = rng.permutation(40)
    second = passing_bablok(x[perm], y[perm], level=0.95)
    assert (first.slope, first.intercept, first.slope_ci_low, first.slope_ci_high) == (
        second.slope,
        second.intercept,
        second.slope_ci_low,
        second.slope_ci_high,
    )
    # The reference takes vertical pairs' sign from the pair's own order; same result.
    ref = _pb_reference(x[perm].tolist(), y[perm].tolist(), 0.95)
    assert first.slope == pytest.approx(ref["b"], rel=1e-12)
    assert first.slope_ci_low == pytest.approx(ref["lo"], rel=1e-12)


def test_passing_bablok_linearity_flags_a_curve() -> None:
    x = np.linspace(1, 30, 40)
    straight = passing_bablok(x, x * 1.02 + np.sin(np.arange(40) * 2.3) * 0.3, level=0.95)
    curved = passing_bablok(x, 0.02 * x**2 + 0.5 * x, level=0.95)
    assert straight.linear
    assert not curved.linear
    assert curved.cusum_max > curved.cusum_critical
    # h at 95 % is the Kolmogorov–Smirnov constant 1.36 (tabulated in the paper; from memory).
    below = int(np.sum(0.02 * x**2 + 0.5 * x < curved.intercept + curved.slope * x))
    assert curved.cusum_critical / math.sqrt(below + 1) == pytest.approx(1.358, abs=1e-3)


def test_passing_bablok_too_few_points_for_the_interval() -> None:
    pb = passing_bablok(np.array([1.0, 2.0, 3.0, 4.0]), np.array([1.1, 2.0, 3.2, 3.9]), level=0.95)
    assert math.isfinite(pb.slope)
    assert not pb.interval_available
    assert math.isnan(pb.slope_ci_low)


def test_passing_bablok_refusals() -> None:
    with pytest.raises(FitError, match="at least 3"):
        passing_bablok(np.array([1.0, 2.0]), np.array([1.0, 2.0]), level=0.95)
    with pytest.raises(FitError, match="no usable pairs"):
        passing_bablok(np.array([1.0, 1.0, 1.0]), np.array([2.0, 2.0, 2.0]), level=0.95)
    big = np.arange(MAX_POINTS + 1, dtype=float)
    with pytest.raises(FitError, match="limited"):
        passing_bablok(big, big, level=0.95)


# --- Bias at decision levels --------------------------------------------------------------------


def test_ols_bias_matches_statsmodels_mean_interval() -> None:
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(5)
    x = rng.uniform(0.5, 12.0, 30)
    y = 0.2 + 0.97 * x + rng.normal(0, 0.3, 30)
    levels = [1.0, 4.0, 10.0]
    got = bias_at(x, y, levels, method="ols", level=0.95)
    res = sm.OLS(y, sm.add_constant(x)).fit()
    pred = res.get_prediction(sm.add_constant(np.array(levels), has_constant="add"))
    ci = pred.conf_int(alpha=0.05)
    for b, at, mean, (lo, hi) in zip(got, levels, pred.predicted_mean, ci, strict=True):
        assert b.at == at
        assert b.estimate == pytest.approx(mean - at, rel=1e-10)
        assert b.ci_low == pytest.approx(lo - at, rel=1e-10)
        assert b.ci_high == pytest.approx(hi - at, rel=1e-10)
        assert b.percent == pytest.approx(100 * (mean - at) / at, rel=1e-10)
        assert b.line == "ols"


def _pb_line(xs: list[float], ys: list[float]) -> tuple[float, float] | None:
    """Intercept and slope only, by the published definition, one pair at a time (None: no line)."""
    slopes = []
    for i, j in itertools.combinations(range(len(xs)), 2):
        dx, dy = xs[j] - xs[i], ys[j] - ys[i]
        if dx == 0 and dy == 0:
            continue
        s = (math.inf if dy > 0 else -math.inf) if dx == 0 else dy / dx
        if s != -1:
            slopes.append(s)
    slopes.sort()
    big_n, k = len(slopes), sum(1 for s in slopes if s < -1)
    hi_rank = (big_n + 1) // 2 + k if big_n % 2 else big_n // 2 + 1 + k
    if big_n == 0 or hi_rank > big_n:
        return None
    odd = slopes[(big_n + 1) // 2 + k - 1]
    b = odd if big_n % 2 else (slopes[big_n // 2 + k - 1] + slopes[big_n // 2 + k]) / 2
    if not math.isfinite(b):
        return None
    return statistics.median([y - b * x for x, y in zip(xs, ys, strict=True)]), b


def _type7(values: list[float], p: float) -> float:
    """The sample quantile by linear interpolation between order statistics (Hyndman & Fan type 7)."""
    v = sorted(values)
    h = (len(v) - 1) * p
    lo = math.floor(h)
    return v[lo] + (h - lo) * (v[min(lo + 1, len(v) - 1)] - v[lo])


def test_passing_bablok_bias_bootstrap_matches_an_independent_resampling() -> None:
    rng = np.random.default_rng(9)
    x = np.round(rng.uniform(1, 20, 25), 1)  # rounded: resamples hold ties and repeated points
    y = np.round(0.4 + 1.03 * x + rng.normal(0, 0.5, 25), 1)
    got = bias_at(x, y, [2.0, 12.0], method="passing_bablok", level=0.9)
    pb = passing_bablok(x, y, level=0.9)
    # The same resamples (same generator and seed), each line from the one-pair-at-a-time definition.
    draw = np.random.default_rng(BOOTSTRAP_SEED)
    values: dict[float, list[float]] = {2.0: [], 12.0: []}
    for _ in range(1000):
        idx = draw.integers(0, 25, 25)
        line = _pb_line(x[idx].tolist(), y[idx].tolist())
        if line is not None:
            for at, found in values.items():
                found.append(line[0] + (line[1] - 1) * at)
    for b in got:
        assert b.estimate == pytest.approx(pb.intercept + (pb.slope - 1) * b.at, rel=1e-12)
        assert b.ci_low == pytest.approx(_type7(values[b.at], 0.05), rel=1e-9, abs=1e-12)
        assert b.ci_high == pytest.approx(_type7(values[b.at], 0.95), rel=1e-9, abs=1e-12)
        assert b.line == "passing_bablok"


def test_passing_bablok_bias_interval_covers_the_true_bias() -> None:
    # Simulation (invented data, known truth): the 95 % interval should cover the true bias
    # at the centre and at the edge of the data about 95 % of the time; checked loosely (60 runs).
    rng = np.random.default_rng(123)
    covered = {5.0: 0, 10.0: 0}
    widths = []  # against the least-squares interval on the same data: a little wider, never silly
    runs = 60
    for _ in range(runs):
        truth = rng.uniform(2.0, 18.0, 30)
        x = truth + rng.normal(0, 0.4, 30)
        y = 0.3 + 1.05 * truth + rng.normal(0, 0.4, 30)
        lows, highs = bootstrap_values(
            x, y, np.array([5.0, 10.0]), level=0.95, resamples=300, seed=int(rng.integers(1 << 30))
        )
        ols = bias_at(x, y, [5.0, 10.0], method="ols", level=0.95)
        for at, lo, hi, o in zip((5.0, 10.0), lows, highs, ols, strict=True):
            covered[at] += int(lo <= 0.3 + 1.05 * at <= hi)
            widths.append((hi - lo) / (o.ci_high - o.ci_low))
    for at, hits in covered.items():
        assert 0.85 <= hits / runs <= 1.0, (at, hits)
    assert 0.8 <= float(np.mean(widths)) <= 1.8


def test_passing_bablok_bootstrap_refuses_above_its_limit() -> None:
    # above the limit the bias takes the rank-based interval instead (tests/test_passing_bablok_limits.py)
    x = np.linspace(1, 50, BOOTSTRAP_MAX_POINTS + 1)
    with pytest.raises(FitError, match="limited"):
        bootstrap_values(x, x * 1.01, np.array([10.0]), level=0.95)


def _deming(x: Array, y: Array, lam: float) -> tuple[float, float]:
    """Deming's closed form (Linnet 1990; from memory) written out independently."""
    xm, ym = x.mean(), y.mean()
    sxx = ((x - xm) ** 2).sum()
    syy = ((y - ym) ** 2).sum()
    sxy = ((x - xm) * (y - ym)).sum()
    b = (syy - lam * sxx + math.sqrt((syy - lam * sxx) ** 2 + 4 * lam * sxy**2)) / (2 * sxy)
    return ym - b * xm, b


def test_deming_bias_jackknife_by_brute_force() -> None:
    rng = np.random.default_rng(21)
    t = rng.uniform(2, 30, 25)
    x = t + rng.normal(0, 0.7, 25)
    y = 1.0 + 0.95 * t + rng.normal(0, 0.7, 25)
    (b,) = bias_at(x, y, [10.0], method="deming", level=0.95, error_ratio=1.5)
    a_full, s_full = _deming(x, y, 1.5)
    assert b.estimate == pytest.approx(a_full + (s_full - 1) * 10.0, rel=1e-10)
    loo = []
    for i in range(25):
        keep = np.arange(25) != i
        a_i, s_i = _deming(x[keep], y[keep], 1.5)
        loo.append(a_i + (s_i - 1) * 10.0)
    arr = np.array(loo)
    se = math.sqrt(24 / 25 * ((arr - arr.mean()) ** 2).sum())
    assert b.ci_high - b.estimate == pytest.approx(stats.t.ppf(0.975, 24) * se, rel=1e-8)


def test_bias_rejects_bad_arguments() -> None:
    x = np.arange(1.0, 6.0)
    with pytest.raises(ValueError, match="unknown line"):
        bias_at(x, x, [1.0], method="median", level=0.95)
    with pytest.raises(ValueError, match="finite"):
        bias_at(x, x, [math.nan], method="ols", level=0.95)
    assert bias_at(x, x + 0.1, [], method="ols", level=0.95) == ()
