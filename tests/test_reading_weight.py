"""Weighted fits: the weight a new reading has in every prediction interval (sidecar key reading_weight).

Reference: statsmodels WLS ``get_prediction(exog, weights=...)`` — the prediction variance of a new
reading of weight w is σ²/w plus the variance of the mean. The observations (observations.csv), the
predictions (fit.json) and the chart band use one and the same weight, and the page says which.
Data: invented (a sensor whose scatter grows with the reading), built by the real CLI in a tmp folder.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from sitegen.cli import main


def _build(tmp_path: Path, extra: str) -> tuple[dict[str, object], pd.DataFrame, str, pd.DataFrame]:
    rng = np.random.default_rng(8)
    x = np.linspace(1, 10, 30)
    w = 1 / x**2
    y = 2.0 + 0.8 * x + rng.normal(0, 0.2, x.size) * x
    frame = pd.DataFrame({"x": x, "y": y, "w": w})
    data = tmp_path / "data"
    data.mkdir()
    frame.to_csv(data / "sensor.csv", index=False)
    (data / "sensor.toml").write_text(f'model = "y ~ x"\nweights = "w"\npredict_at = [2.0, 5.0, 8.0]\n{extra}')
    out = tmp_path / "site"
    assert main(["build", str(data), "-o", str(out), "-j", "1", "-q"]) in (0, 1)
    folder = out / "datasets" / "sensor"
    fit = json.loads((folder / "fit.json").read_text(encoding="utf-8"))
    obs = pd.read_csv(folder / "observations.csv")
    return fit, obs, (folder / "index.html").read_text(encoding="utf-8"), frame


@pytest.mark.parametrize(("extra", "weight"), [("", 1.0), ("reading_weight = 4.0\n", 4.0)])
def test_observations_predictions_and_page_agree_on_the_reading_weight(
    tmp_path: Path, extra: str, weight: float
) -> None:
    fit, obs, page, frame = _build(tmp_path, extra)
    X = sm.add_constant(frame["x"].to_numpy())
    res = sm.WLS(frame["y"].to_numpy(), X, weights=frame["w"].to_numpy()).fit()
    at_rows = res.get_prediction(exog=X, weights=np.full(len(frame), weight)).summary_frame(alpha=0.05)
    np.testing.assert_allclose(obs["pred_low"], at_rows["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(obs["pred_high"], at_rows["obs_ci_upper"], rtol=1e-10)
    new = np.column_stack([np.ones(3), [2.0, 5.0, 8.0]])  # 3 points: statsmodels rejects as many weights as columns
    at_new = res.get_prediction(exog=new, weights=np.full(3, weight)).summary_frame(alpha=0.05)
    preds = fit["predictions"]
    assert isinstance(preds, list)
    np.testing.assert_allclose([p["pred_low"] for p in preds], at_new["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose([p["pred_high"] for p in preds], at_new["obs_ci_upper"], rtol=1e-10)
    assert f"reading of weight {weight:g}" in page
    assert "reading_weight" in page
