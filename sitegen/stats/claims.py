"""Declared linear hypotheses on the coefficients ("x = 1", "Intercept = 0", joint with commas).

Each claim is tested with statsmodels' linear-hypothesis tools (``t_test`` for
one restriction, ``f_test`` for several) on a statsmodels results object that
carries our extended-precision estimates and covariance, so the test machinery
is statsmodels' and the numbers are the accurate ones. statsmodels is imported
only for datasets that declare claims.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sitegen.errors import FormulaError
from sitegen.model import ClaimTest
from sitegen.stats.ols import OlsFit
from sitegen.stats.text import p_text

#: Longest claim read (a linear hypothesis on a few coefficients is a few dozen characters).
MAX_CLAIM_CHARS = 1_000


def _results(fit: OlsFit, X: np.ndarray[Any, Any], y: np.ndarray[Any, Any]) -> Any:
    import pandas as pd  # noqa: PLC0415
    from statsmodels.regression.linear_model import OLS, RegressionResults  # noqa: PLC0415

    model = OLS(y, pd.DataFrame(X, columns=list(fit.terms)))
    return RegressionResults(model, fit.beta, normalized_cov_params=fit.xtx_inv, scale=fit.sigma**2)


def check_claims(
    fit: OlsFit, X: np.ndarray[Any, Any], y: np.ndarray[Any, Any], claims: list[str]
) -> list[ClaimTest | FormulaError]:
    """Test each declared claim; an unreadable claim comes back as a :class:`FormulaError`."""
    import patsy  # noqa: PLC0415

    results = _results(fit, X, y)
    out: list[ClaimTest | FormulaError] = []
    for claim in claims:
        if len(claim) > MAX_CLAIM_CHARS:
            out.append(
                FormulaError(
                    f"claim {claim[:40]!r}… is {len(claim):,} characters long, more than the {MAX_CLAIM_CHARS:,} "
                    "allowed; it was not tested",
                    hint='shorten it in key \'claims\', e.g. "x = 1" or "x = 1, Intercept = 0"',
                )
            )
            continue
        try:
            constraint = patsy.DesignInfo(list(fit.terms)).linear_constraint(claim)
        except RecursionError:
            out.append(FormulaError(f"claim {claim[:40]!r}… is nested too deeply to be read; it was not tested"))
            continue
        except (patsy.PatsyError, ValueError, KeyError) as exc:
            names = ", ".join(fit.terms)
            out.append(
                FormulaError(
                    f"claim {claim!r} cannot be read: {' '.join(str(exc).split())[:200]}",
                    hint=f'write it like "x = 1" or "x = 1, Intercept = 0" using the terms {names}',
                )
            )
            continue
        out.append(_one(results, fit, claim, constraint))
    return out


def _one(results: Any, fit: OlsFit, claim: str, constraint: Any) -> ClaimTest | FormulaError:
    R = np.asarray(constraint.coefs, dtype=float)
    q = np.asarray(constraint.constants, dtype=float)
    with np.errstate(all="ignore"):
        if R.shape[0] == 1:
            t = results.t_test((R, q))
            stat, p, test, df_num = float(np.ravel(t.tvalue)[0]), float(np.ravel(t.pvalue)[0]), "t", 1
        else:
            try:
                f = results.f_test((R, q))
            except np.linalg.LinAlgError:
                return FormulaError(f"claim {claim!r} repeats or contradicts itself; its restrictions are dependent")
            stat, p, test, df_num = float(np.ravel(f.fvalue)[0]), float(f.pvalue), "F", int(f.df_num)
    rejected = p < 1 - fit.level
    pct = f"{fit.level * 100:g}%"
    conclusion = (
        f"The data contradict this claim at the {pct} level ({p_text(p)})."
        if rejected
        else f"The data are consistent with this claim at the {pct} level ({p_text(p)}); this does not prove it."
    )
    return ClaimTest(
        claim=claim,
        statistic=stat,
        test=test,
        df_num=df_num,
        df_den=fit.df_resid,
        p_value=p,
        rejected=bool(rejected),
        conclusion=conclusion,
    )
