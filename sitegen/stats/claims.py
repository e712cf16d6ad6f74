"""Declared linear hypotheses on the coefficients ("x = 1", "Intercept = 0", joint with commas).

Hypotheses are parsed by patsy's ``linear_constraint`` — the same parser
statsmodels' ``t_test``/``f_test`` use — and tested with the classical Wald
statistic on our own (extended-precision) estimates; the tests compare the
results with statsmodels' ``f_test`` and ``t_test``.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import stats as sps

from sitegen.errors import FormulaError
from sitegen.model import ClaimTest
from sitegen.stats.ols import OlsFit


def test_claim(fit: OlsFit, design_info: Any, claim: str) -> ClaimTest:
    """Test one declared hypothesis (a comma joins restrictions into one joint test)."""
    import patsy  # noqa: PLC0415

    try:
        constraint = design_info.linear_constraint(claim)
    except (patsy.PatsyError, ValueError, KeyError) as exc:
        names = ", ".join(fit.terms)
        raise FormulaError(
            f"claim {claim!r} cannot be read: {' '.join(str(exc).split())[:200]}",
            hint=f'write it like "x = 1" or "x = 1, Intercept = 0" using the terms {names}',
        ) from exc
    R = np.asarray(constraint.coefs, dtype=float)
    q = np.asarray(constraint.constants, dtype=float).ravel()
    diff = R @ fit.beta - q
    cov = R @ fit.xtx_inv @ R.T * fit.sigma**2
    k = R.shape[0]
    alpha = 1 - fit.level
    if k == 1:
        se = float(np.sqrt(cov[0, 0]))
        stat = float(diff[0] / se) if se > 0 else float("inf") * float(np.sign(diff[0]) or 1.0)
        p = float(2 * sps.t.sf(abs(stat), fit.df_resid))
        test, df_num = "t", 1
    else:
        try:
            stat = float(diff @ np.linalg.solve(cov, diff) / k)
        except np.linalg.LinAlgError:
            raise FormulaError(
                f"claim {claim!r} repeats or contradicts itself; its restrictions are dependent"
            ) from None
        p = float(sps.f.sf(stat, k, fit.df_resid))
        test, df_num = "F", k
    rejected = p < alpha
    pct = f"{fit.level * 100:g}%"
    conclusion = (
        f"The data contradict this claim at the {pct} level (p = {p:.3g})."
        if rejected
        else f"The data are consistent with this claim at the {pct} level (p = {p:.3g}); this does not prove it."
    )
    return ClaimTest(
        claim=claim, statistic=stat, test=test, df_num=df_num, df_den=fit.df_resid,
        p_value=p, rejected=bool(rejected), conclusion=conclusion,
    )  # fmt: skip
