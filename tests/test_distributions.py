"""Our distribution helpers and Shapiro–Wilk against scipy.stats, the reference implementation."""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from scipy import stats

from sitegen.stats import distributions as dist
from sitegen.stats.shapiro import shapiro_wilk


@pytest.mark.parametrize("df", [1, 2, 5, 30, 1000])
def test_t_distribution_matches_scipy(df: int) -> None:
    for x in (-40.0, -3.0, -0.5, 0.0, 0.7, 2.0, 12.0):
        assert float(dist.t_sf(x, df)) == pytest.approx(float(stats.t.sf(x, df)), rel=1e-12, abs=1e-300)
    for q in (0.5, 0.9, 0.975, 0.995):
        assert dist.t_ppf(q, df) == pytest.approx(float(stats.t.ppf(q, df)), rel=1e-10)
    for a in (0.05, 1e-4, 1e-9):
        assert dist.t_isf(a, df) == pytest.approx(float(stats.t.isf(a, df)), rel=1e-8)


@pytest.mark.parametrize(("d1", "d2"), [(1, 1), (1, 10), (2, 37), (10, 71), (3, 5000)])
def test_f_distribution_matches_scipy(d1: int, d2: int) -> None:
    for x in (0.0, 0.3, 1.0, 4.2, 50.0, 2162.4):
        assert dist.f_sf(x, d1, d2) == pytest.approx(float(stats.f.sf(x, d1, d2)), rel=1e-10, abs=1e-300)
    assert dist.f_ppf(0.5, d1, d2) == pytest.approx(float(stats.f.median(d1, d2)), rel=1e-10)


def test_chi2_beta_normal_match_scipy() -> None:
    for k in (1, 2, 7):
        for x in (0.0, 0.5, 3.0, 25.0):
            assert dist.chi2_sf(x, k) == pytest.approx(float(stats.chi2.sf(x, k)), rel=1e-12, abs=1e-300)
    for a, b, x in ((2.0, 3.0, 0.2), (10.5, 12.0, 0.5), (0.7, 40.0, 0.01)):
        assert dist.beta_cdf(x, a, b) == pytest.approx(float(stats.beta.cdf(x, a, b)), rel=1e-12)
        assert dist.beta_sf(x, a, b) == pytest.approx(float(stats.beta.sf(x, a, b)), rel=1e-12)
    q = np.array([1e-6, 0.025, 0.5, 0.9])
    np.testing.assert_allclose(dist.norm_ppf(q), stats.norm.ppf(q), rtol=1e-13)
    assert dist.norm_sf(1.96) == pytest.approx(float(stats.norm.sf(1.96)), rel=1e-13)


@pytest.mark.parametrize("n", [3, 4, 5, 6, 7, 10, 11, 12, 25, 200, 5000])
def test_shapiro_wilk_matches_scipy(n: int) -> None:
    """Royston's AS R94 as in scipy.stats.shapiro (which computes parts in single precision)."""
    rng = np.random.default_rng(n)
    for sample in (rng.normal(size=n), rng.standard_exponential(n), rng.uniform(size=n)):
        w, p = shapiro_wilk(sample)
        ref = stats.shapiro(sample)
        assert w == pytest.approx(float(ref.statistic), abs=1e-6)
        assert p == pytest.approx(float(ref.pvalue), abs=1e-5)


def test_shapiro_wilk_refuses_what_it_cannot_judge() -> None:
    with pytest.raises(ValueError, match="3 to 5000"):
        shapiro_wilk([1.0, 2.0])
    with pytest.raises(ValueError, match="not all equal"):
        shapiro_wilk([2.0, 2.0, 2.0, 2.0])


# --- wide grids: our own incomplete beta/gamma against scipy.stats and 40-digit mpmath ----------------

_T_ARGS = (1e-8, 1e-3, 0.1, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 5.0, 8.0, 12.0, 20.0, 40.0, 100.0, 1e3, 1e5)


@pytest.mark.parametrize("df", [2, 3, 4, 5, 7, 10, 15, 16, 29, 30, 50, 100, 197, 1000, 2.5, 0.7])
def test_t_tails_and_quantiles_over_a_wide_grid(df: float) -> None:
    """Both tails and quantiles down to 1e-100 (reference: scipy.stats.t)."""
    for x in _T_ARGS:
        for sign in (1.0, -1.0):
            ref = float(stats.t.sf(sign * x, df))
            assert float(dist.t_sf(sign * x, df)) == pytest.approx(ref, rel=1e-12, abs=1e-300)
    for q in (0.6, 0.9, 0.95, 0.975, 0.995, 0.9995, 1 - 1e-6):
        assert dist.t_ppf(q, df) == pytest.approx(float(stats.t.ppf(q, df)), rel=1e-12)
        assert dist.t_ppf(1 - q, df) == pytest.approx(float(stats.t.ppf(1 - q, df)), rel=1e-12)
    for a in (0.3, 0.05, 1e-3, 1e-6, 1e-9, 1e-15, 1e-30, 1e-100):
        assert dist.t_isf(a, df) == pytest.approx(float(stats.t.isf(a, df)), rel=1e-11)


def test_t_with_one_and_two_degrees_of_freedom_matches_the_closed_forms() -> None:
    """df = 1 is the Cauchy distribution, df = 2 has an algebraic CDF (textbook closed forms)."""
    for x in _T_ARGS:
        assert float(dist.t_sf(x, 1)) == pytest.approx(0.5 - math.atan(x) / math.pi, rel=1e-14)
        assert float(dist.t_sf(x, 2)) == pytest.approx(0.5 * (1 - x / math.sqrt(x * x + 2)), rel=1e-9)
    for a in (0.25, 0.025, 1e-6, 1e-12):
        assert dist.t_isf(a, 1) == pytest.approx(1 / math.tan(math.pi * a), rel=1e-13)


def _mp_t_sf(t: float, df: float) -> float:
    with mpmath.workdps(40):
        x = mpmath.mpf(df) / (df + mpmath.mpf(t) ** 2)
        return float(mpmath.betainc(mpmath.mpf(df) / 2, mpmath.mpf(1) / 2, 0, x, regularized=True) / 2)


@pytest.mark.parametrize("df", [1e4, 1e5, 1e6, 1e7])
def test_t_with_many_degrees_of_freedom_against_40_digit_arithmetic(df: float) -> None:
    """Large df (datasets of 10⁴–10⁷ rows). Measured accuracy: 1e-12 at 10⁴ rows, 4e-10 at 10⁷.

    The continued fraction needs x = df/(df + t²) rounded to a double; I_x(a, ½) amplifies that
    rounding about a-fold, which sets the limit (mpmath as the reference).
    """
    tol = 1e-12 if df <= 1e4 else 1e-11 if df <= 1e5 else 1e-10 if df <= 1e6 else 1e-9
    for t in (0.1, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 5.0, 8.0, 12.0, 20.0):
        assert float(dist.t_sf(t, df)) == pytest.approx(_mp_t_sf(t, df), rel=tol)
    for q in (0.9, 0.975, 0.995):
        assert dist.t_ppf(q, df) == pytest.approx(float(stats.t.ppf(q, df)), rel=tol)


@pytest.mark.parametrize("d1", [1, 2, 3, 5, 10, 30])
def test_f_tails_and_quantiles_over_a_wide_grid(d1: int) -> None:
    for d2 in (1, 2, 5, 10, 37, 100, 1000, 10_000):
        for x in (0.0, 0.01, 0.3, 1.0, 2.0, 4.2, 10.0, 50.0, 1e3, 1e6):
            ref = float(stats.f.sf(x, d1, d2))
            assert dist.f_sf(x, d1, d2) == pytest.approx(ref, rel=1e-11, abs=1e-290)
        for q in (0.05, 0.5, 0.95):
            assert dist.f_ppf(q, d1, d2) == pytest.approx(float(stats.f.ppf(q, d1, d2)), rel=1e-11)


def test_chi2_and_beta_over_a_wide_grid() -> None:
    for k in (1, 2, 3, 5, 7, 10, 30, 100, 1000):
        for x in (0.0, 0.01, 0.5, 1.0, 3.0, 10.0, 25.0, 100.0, 500.0, 2000.0, 5000.0):
            assert dist.chi2_sf(x, k) == pytest.approx(float(stats.chi2.sf(x, k)), rel=1e-12, abs=1e-300)
    for a, b in ((2, 3), (10.5, 12), (0.7, 40), (0.5, 0.5), (100, 300), (1, 1), (2.5e4, 2.5e4)):
        for x in (1e-6, 0.01, 0.2, 0.4, 0.5, 0.6, 0.9, 0.999):
            tol = 1e-12 if max(a, b) < 1e3 else 1e-10  # log B(a, b) ≈ −3.5e4 carries ~1e-12 absolute
            assert dist.beta_cdf(x, a, b) == pytest.approx(float(stats.beta.cdf(x, a, b)), rel=tol, abs=1e-300)
            assert dist.beta_sf(x, a, b) == pytest.approx(float(stats.beta.sf(x, a, b)), rel=tol, abs=1e-300)


def test_normal_quantiles_and_tails_far_out() -> None:
    q = np.array([1e-300, 1e-100, 1e-20, 1e-6, 0.001, 0.02, 0.02425, 0.03, 0.2, 0.4999, 0.6, 0.975, 1 - 1e-10])
    np.testing.assert_allclose(dist.norm_ppf(q), stats.norm.ppf(q), rtol=1e-12)
    assert float(dist.norm_ppf(np.array(0.5))) == 0.0
    for z in (-30.0, -5.0, -1.0, 0.0, 1.0, 1.96, 5.0, 10.0, 30.0):
        # z/√2 is rounded before erfc, and erfc far out amplifies that z²-fold: 1e-13 at z = 30
        assert dist.norm_sf(z) == pytest.approx(float(stats.norm.sf(z)), rel=1e-12, abs=1e-300)


def test_fitting_does_not_import_scipy() -> None:
    """The point of computing these here: a process that fits never pays for importing scipy."""
    import subprocess
    import sys

    code = (
        "import sys; from sitegen.stats import distributions, ols, checks, calibration, lines, shapiro;"
        "print(any(m == 'scipy' or m.startswith('scipy.') for m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_edges_give_the_limits_or_nan_quickly() -> None:
    """Inputs the statistics never pass today still get an answer, not a hang or an exception (scipy as reference)."""
    import time

    start = time.perf_counter()
    np.testing.assert_array_equal(dist.norm_ppf(np.array([0.0, 1.0])), [-np.inf, np.inf])
    assert np.isnan(dist.norm_ppf(np.array([np.nan])))[0]
    for df in (np.nan, 0.0, -1.0):
        assert math.isnan(dist.t_ppf(0.975, df))
        assert math.isnan(float(dist.t_sf(2.0, df)))
        assert math.isnan(dist.chi2_sf(1.0, df))
    assert float(dist.t_sf(2.0, math.inf)) == pytest.approx(float(stats.norm.sf(2.0)), rel=1e-14)
    assert dist.t_ppf(0.975, math.inf) == pytest.approx(float(stats.norm.ppf(0.975)), rel=1e-13)
    assert dist.chi2_sf(-math.inf, 3) == 1.0
    assert dist.chi2_sf(math.inf, 3) == 0.0
    # scipy gives -inf here; 50-digit mpmath puts P(T > 1.033110836044646e100) at 1.00000000000002e-300
    assert dist.t_isf(1e-300, 3) == pytest.approx(1.033110836044646e100, rel=1e-12)
    assert dist.t_ppf(1e-20, 0.5) == pytest.approx(float(stats.t.ppf(1e-20, 0.5)), rel=1e-9)
    assert dist.f_ppf(0.999999, 1e6, 1) == pytest.approx(float(stats.f.ppf(0.999999, 1e6, 1)), rel=1e-6)
    assert dist.f_ppf(0.05, 3, 12) == pytest.approx(float(stats.f.ppf(0.05, 3, 12)), rel=1e-11)
    assert dist.beta_ppf(0.0, 2, 3) == 0.0
    assert dist.beta_ppf(1.0, 2, 3) == 1.0
    assert float(dist.t_sf(1e200, 3)) == 0.0  # 1.1e-600 (mpmath): below the smallest double
    assert time.perf_counter() - start < 2.0
