"""The script a user would otherwise write: sequential pandas + statsmodels + Altair, one standalone page each.

Run as ``python bench/baseline.py DATA OUT``. Same statistics as sitegen's core
(fit, intervals, bands, residual tests, influence), a layered Altair chart built
from string shorthands, and a standalone HTML page per dataset with the chart
JavaScript inlined.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path


def main() -> None:
    import altair as alt
    import numpy as np
    import pandas as pd
    import statsmodels.formula.api as smf
    import vl_convert as vlc
    from statsmodels.stats.diagnostic import het_breuschpagan, linear_reset
    from statsmodels.stats.outliers_influence import OLSInfluence
    from statsmodels.stats.stattools import durbin_watson

    data, out = Path(sys.argv[1]), Path(sys.argv[2])
    out.mkdir(parents=True, exist_ok=True)
    bundle = vlc.javascript_bundle()  # type: ignore[call-arg]  # the stub misses the default snippet
    for csv in sorted(data.rglob("*.csv")):
        df = pd.read_csv(csv)
        res = smf.ols("y ~ x", df).fit()
        pred = res.get_prediction(df).summary_frame(alpha=0.05)
        het_breuschpagan(res.resid, res.model.exog)
        durbin_watson(res.resid)
        linear_reset(res, power=2, use_f=True)
        infl = OLSInfluence(res)
        frame = df.assign(
            fitted=res.fittedvalues,
            resid=res.resid,
            lo=pred["obs_ci_lower"],
            hi=pred["obs_ci_upper"],
            lev=infl.hat_matrix_diag,
            cooks=infl.cooks_distance[0],
        )
        base = alt.Chart(frame)
        chart = alt.layer(
            base.mark_area(opacity=0.2).encode(x="x:Q", y="lo:Q", y2="hi:Q"),
            base.mark_line().encode(x="x:Q", y="fitted:Q"),
            base.mark_point().encode(x="x:Q", y="y:Q", tooltip=["x", "y", "resid"]),
        )
        spec = chart.to_dict()
        resid_spec = alt.Chart(frame).mark_point().encode(x="fitted:Q", y="resid:Q").to_dict()
        coef = res.summary2().tables[1].to_html()
        page = (
            f"<html><head><meta charset='utf-8'><script>{bundle}</script></head><body>"
            f"<h1>{csv.stem}</h1>{coef}<div id='a'></div><div id='b'></div>"
            f"<script>vegaEmbed('#a', {json.dumps(spec)});vegaEmbed('#b', {json.dumps(resid_spec)});</script>"
            "</body></html>"
        )
        (out / f"{csv.stem}.html").write_text(page, encoding="utf-8")
        frame.to_csv(out / f"{csv.stem}.csv", index=False)
        np.asarray(res.params)


if __name__ == "__main__":
    main()
