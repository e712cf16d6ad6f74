"""One line per group, and the F test that the groups share one slope.

The test compares y ~ group-specific intercepts + one common slope with
y ~ group-specific intercepts and slopes (the interaction F test; common
practice, equivalent to statsmodels' ``anova_lm`` of the two nested models,
which the tests use as the reference).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.model import GroupComparison, GroupLine
from sitegen.stats import distributions as dist
from sitegen.stats.ols import fit_ols
from sitegen.stats.solver import LD
from sitegen.stats.text import p_text


def compare_groups(
    x: NDArray[np.float64],
    y: NDArray[np.float64],
    labels: NDArray[np.str_],
    column: str,
    level: float,
    *,
    weights: NDArray[np.float64] | None = None,
) -> GroupComparison:
    """Fit each group's line and test equal slopes (weighted least squares when ``weights`` are given)."""
    names = sorted({str(v) for v in labels})
    if len(names) < 2:
        raise FitError(f"group column {column!r} has only one value, so there is nothing to compare")
    if len(names) > 50:
        raise FitError(f"group column {column!r} has {len(names)} different values; at most 50 groups are drawn")
    lines = []
    for name in names:
        mask = labels == name
        n = int(mask.sum())
        if n < 3 or np.ptp(x[mask]) == 0:
            raise FitError(f"group {name!r} of column {column!r} needs at least 3 rows with different x values")
        X = np.column_stack([np.ones(n), x[mask]]).astype(LD)
        w = None if weights is None else weights[mask]
        f = fit_ols(X, y[mask].astype(LD), ("Intercept", "x"), has_intercept=True, level=level, weights=w)
        lines.append(GroupLine(name, n, float(f.beta[1]), float(f.beta[0]), float(f.ci_low[1]), float(f.ci_high[1])))
    dummies = np.column_stack([(labels == g).astype(float) for g in names])
    reduced = np.column_stack([dummies, x])
    full = np.column_stack([dummies, dummies * x[:, None]])
    terms_r = tuple(f"g{i}" for i in range(reduced.shape[1]))
    terms_f = tuple(f"g{i}" for i in range(full.shape[1]))
    fr = fit_ols(reduced.astype(LD), y.astype(LD), terms_r, has_intercept=True, level=level, weights=weights)
    ff = fit_ols(full.astype(LD), y.astype(LD), terms_f, has_intercept=True, level=level, weights=weights)
    df_num = len(names) - 1
    if ff.ssr > 0:
        f_stat = ((fr.ssr - ff.ssr) / df_num) / (ff.ssr / ff.df_resid)
        p = dist.f_sf(f_stat, df_num, ff.df_resid)
    else:
        f_stat, p = float("nan"), float("nan")
    pct = f"{level * 100:g}%"
    if not np.isfinite(p):
        conclusion = "The lines fit their groups exactly, so the slopes cannot be compared statistically."
    elif p < 1 - level:
        conclusion = f"The slopes differ between the groups at the {pct} level ({p_text(p)}): use one line per group."
    else:
        conclusion = (
            f"The data do not show different slopes at the {pct} level ({p_text(p)}); "
            "a common slope is consistent with them."
        )
    return GroupComparison(
        column=column,
        lines=tuple(lines),
        f_stat=float(f_stat),
        df_num=df_num,
        df_den=ff.df_resid,
        p_value=p,
        conclusion=conclusion,
    )
