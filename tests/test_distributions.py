"""Our distribution helpers and Shapiro–Wilk against scipy.stats, the reference implementation."""

from __future__ import annotations

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
