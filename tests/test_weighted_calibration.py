"""Samples read back through a weighted calibration line: Fieller's interval with the weighted fit's
covariance and the new reading's weight, and detection/quantitation limits for weighted lines.

Independent sources beside each check:
* statsmodels WLS (``cov_params``, ``get_prediction(...).se_mean`` and, for a reading of given weight,
  ``get_prediction(..., weights=w).conf_int(obs=True)``) for every variance in the interval;
* scipy's ``brentq`` root finder on the Fieller condition written out here, (ȳ₀ − a − b·x)² = t²·(var of the
  fitted mean at x + var of the new reading at x), rather than the closed-form quadratic sitegen solves;
* the unweighted Fieller interval (:func:`sitegen.stats.calibration.inverse_predict`, itself checked against
  a published worked example in tests/test_calibration.py) as the limit with all weights 1.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import statsmodels.api as sm
from conftest import cli, fit_json, write_csv, write_toml
from scipy import optimize, stats

from sitegen.stats.calibration import (
    ReadingVariance,
    inverse_predict,
    inverse_predict_wls,
    weighted_detection_limits,
)

RNG = np.random.default_rng(2026)
X = np.repeat([0.5, 1.0, 2.0, 5.0, 10.0, 20.0], 3)
Y = np.round((0.02 + 0.85 * X) * (1 + RNG.normal(0, 0.04, X.size)), 5)


def _wls(w: np.ndarray) -> Any:
    return sm.WLS(Y, sm.add_constant(X), weights=w).fit()


def _fieller_roots(res: Any, y0: float, m: int, reading_var: Any, level: float = 0.95) -> tuple[float, float]:
    """Both ends of Fieller's set by root finding on the condition itself (statsmodels for the variances)."""
    a, b = res.params
    t = stats.t.ppf(0.5 + level / 2, res.df_resid)

    def gap(x: float) -> float:
        se_mean = float(res.get_prediction(np.array([[1.0, x]])).se_mean[0])
        return float((y0 - a - b * x) ** 2 - t**2 * (se_mean**2 + res.scale * reading_var(x) / m))

    x0 = (y0 - a) / b
    assert gap(x0) < 0  # the estimate lies inside the set
    span = 10 * (abs(x0) + 1)
    return optimize.brentq(gap, x0 - span, x0, xtol=1e-14), optimize.brentq(gap, x0, x0 + span, xtol=1e-14)


def _ours(res: Any, responses: tuple[float, ...], variances: list[ReadingVariance], m: int) -> Any:
    cov = res.cov_params()
    return inverse_predict_wls(
        intercept=float(res.params[0]),
        slope=float(res.params[1]),
        cov=((float(cov[0, 0]), float(cov[0, 1])), (float(cov[1, 0]), float(cov[1, 1]))),
        residual_var=float(res.scale),
        df_resid=int(res.df_resid),
        level=0.95,
        responses=responses,
        variances=variances,
        readings=m,
    )


@pytest.mark.parametrize(
    ("weighting", "variance", "reading_var"),
    [
        ("1/x", ReadingVariance(0.0, 1.0, 0.0), lambda x: x),
        ("1/x²", ReadingVariance(0.0, 0.0, 1.0), lambda x: x * x),
    ],
)
def test_fieller_through_a_weighting_function_against_root_finding(
    weighting: str, variance: ReadingVariance, reading_var: Any
) -> None:
    res = _wls(1 / X if weighting == "1/x" else 1 / X**2)
    responses = (0.5, 3.0, 12.0)
    got = _ours(res, responses, [variance] * 3, 2)
    for r, y0 in zip(got, responses, strict=True):
        low, high = _fieller_roots(res, y0, 2, reading_var)
        assert r.bounded
        assert (r.ci_low, r.ci_high) == pytest.approx((low, high), rel=1e-9)
        x0 = (y0 - res.params[0]) / res.params[1]
        assert r.estimate == pytest.approx(x0, rel=1e-12)
        # the delta-method standard error: statsmodels' mean variance plus the reading's, over the slope
        se_mean = float(res.get_prediction(np.array([[1.0, x0]])).se_mean[0])
        assert r.std_error == pytest.approx(math.sqrt(se_mean**2 + res.scale * reading_var(x0) / 2) / res.params[1])


def test_fieller_with_a_reading_weight_inverts_statsmodels_prediction_intervals() -> None:
    """A reading of constant weight w₀ (a weights column and reading_weight): at each end of Fieller's set the
    response sits exactly on statsmodels' prediction interval for the mean of m readings of weight w₀."""
    w = 1 / X**2
    res = _wls(w)
    w0, m = 0.04, 3  # the weight of one new reading, and readings per sample
    for y0 in (0.9, 4.2, 16.0):
        (r,) = _ours(res, (y0,), [ReadingVariance(1 / w0)], m)
        for end, side in ((r.ci_low, 1), (r.ci_high, 0)):
            pred = res.get_prediction(np.array([[1.0, end]]), weights=np.array([m * w0]))
            limits = pred.conf_int(obs=True, alpha=0.05)[0]
            assert limits[side] == pytest.approx(y0, rel=1e-9)  # rising line: the low end meets the upper limit


def test_weighted_fieller_with_unit_weights_is_the_unweighted_interval() -> None:
    res = _wls(np.ones_like(X))
    x_mean = float(X.mean())
    plain = inverse_predict(
        intercept=float(res.params[0]),
        slope=float(res.params[1]),
        residual_sd=math.sqrt(res.scale),
        n=X.size,
        x_mean=x_mean,
        sxx=float(((X - x_mean) ** 2).sum()),
        y_mean=float(res.params[0] + res.params[1] * x_mean),
        df_resid=int(res.df_resid),
        level=0.95,
        responses=(1.0, 9.0),
        readings=2,
    )
    weighted = _ours(res, (1.0, 9.0), [ReadingVariance(1.0)] * 2, 2)
    for p, q in zip(plain, weighted, strict=True):
        assert (q.ci_low, q.ci_high, q.std_error) == pytest.approx((p.ci_low, p.ci_high, p.std_error), rel=1e-10)


def test_weighted_fieller_is_unbounded_when_the_slope_is_too_uncertain() -> None:
    y = np.array([1.0, 3.0, 0.5, 2.5, 1.2, 2.0])
    x = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    res = sm.WLS(y, sm.add_constant(x), weights=1 / x).fit()
    assert res.pvalues[1] > 0.05  # statsmodels: the slope is not significant at 95 %
    cov = res.cov_params()
    (r,) = inverse_predict_wls(
        intercept=float(res.params[0]),
        slope=float(res.params[1]),
        cov=((float(cov[0, 0]), float(cov[0, 1])), (float(cov[1, 0]), float(cov[1, 1]))),
        residual_var=float(res.scale),
        df_resid=int(res.df_resid),
        level=0.95,
        responses=(2.0,),
        variances=[ReadingVariance(0.0, 1.0, 0.0)],
    )
    assert not r.bounded
    assert (r.ci_low, r.ci_high) == (-math.inf, math.inf)


def test_weighted_detection_limits_against_statsmodels() -> None:
    w = 1 / X**2
    res = _wls(w)
    low_w = float(np.mean(w[np.equal(X, X.min())]))
    pred = res.get_prediction(np.array([[1.0, X.min()]]), weights=np.array([low_w]))
    sigma0 = math.sqrt(float(pred.se_obs[0]) ** 2 - float(pred.se_mean[0]) ** 2)  # one reading's SD there
    lim = weighted_detection_limits(
        slope=float(res.params[1]), residual_sd=math.sqrt(res.scale), low_weight=low_w, low_x=float(X.min())
    )
    assert lim.lod == pytest.approx(3.3 * sigma0 / res.params[1], rel=1e-9)
    assert lim.loq == pytest.approx(10 * sigma0 / res.params[1], rel=1e-9)
    assert "ICH Q2(R1)" in lim.convention
    assert "lowest standard" in lim.basis
    assert ("below the lowest standard" in lim.basis) == (lim.lod < X.min())
    far = weighted_detection_limits(slope=1.0, residual_sd=0.01, low_weight=1.0, low_x=5.0)
    assert "confirm them with blanks" in far.basis  # 0.033 lies below the lowest standard, 5


def test_weighted_calibrations_read_samples_back_with_fieller_and_give_limits(tmp_path: Path) -> None:
    data = tmp_path / "data"
    rows = [("conc", "area"), *zip(X.tolist(), Y.tolist(), strict=True)]
    write_csv(data / "chosen.csv", rows)
    write_toml(data / "chosen.toml", {"purpose": "calibration", "weighting": "1/x^2", "calibrate": [3.0, 12.0]})
    w_rows = [("conc", "area", "w"), *zip(X.tolist(), Y.tolist(), (1 / X**2).tolist(), strict=True)]
    write_csv(data / "column.csv", w_rows)
    write_toml(
        data / "column.toml",
        {"model": "area ~ conc", "weights": "w", "reading_weight": 0.04, "calibrate": [3.0], "readings": 3},
    )
    site = tmp_path / "site"
    assert cli("build", data, "-o", site, "-j", "1").code == 0
    res = _wls(1 / X**2)
    chosen = fit_json(site, "chosen")
    for cal, y0 in zip(chosen["calibration"], (3.0, 12.0), strict=True):
        assert cal["method"] == "fieller, weighted 1/x²"
        assert (cal["ci_low"], cal["ci_high"]) == pytest.approx(_fieller_roots(res, y0, 1, lambda x: x * x), rel=1e-8)
    low_w = 1 / X.min() ** 2
    sigma0 = math.sqrt(res.scale / low_w)
    assert chosen["limits"]["lod"] == pytest.approx(3.3 * sigma0 / res.params[1], rel=1e-8)
    assert chosen["limits"]["loq"] == pytest.approx(10 * sigma0 / res.params[1], rel=1e-8)
    page = (site / "datasets" / "chosen" / "index.html").read_text(encoding="utf-8")
    assert "Fieller&#39;s interval from the weighted fit&#39;s covariance" in page or (
        "Fieller's interval from the weighted fit's covariance" in page
    )
    assert "lowest standard" in page
    # a weights column: the new reading's weight is the sidecar's reading_weight (0.04), the mean of 3 readings
    (cal,) = fit_json(site, "column")["calibration"]
    assert cal["method"] == "fieller, weighted by column w"
    assert (cal["ci_low"], cal["ci_high"]) == pytest.approx(_fieller_roots(res, 3.0, 3, lambda x: 1 / 0.04), rel=1e-8)
