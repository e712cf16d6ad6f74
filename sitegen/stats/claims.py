"""Declared linear hypotheses on the coefficients ("x = 1", "Intercept = 0", joint with commas).

The claim is read by patsy's linear-constraint parser into restrictions R b = q.
The statistics are computed from the fit's own extended-precision factorisation,
the same one the estimates come from: with W = S·R⁻¹ (W W' = (X'WX)⁻¹) and
u = R b − q in extended precision, one restriction gives t = u / (s ‖R W‖), and
several give F = ‖L⁻¹u‖² / (k s²) with L L' = (R W)(R W)' from a Householder QR
of (R W)' in extended precision — never an inverse of R (X'X)⁻¹ R' in float64,
which loses cond² · ε on ill-conditioned designs (NIST Filip). These are the
classical Wald t and F statistics (as statsmodels' ``t_test``/``f_test``, the
reference in the tests); t and F tails from :mod:`sitegen.stats.distributions`.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sitegen.errors import FitError, FormulaError
from sitegen.model import ClaimTest
from sitegen.stats import distributions as dist
from sitegen.stats.ols import OlsFit
from sitegen.stats.solver import restriction_quadratic_form
from sitegen.stats.text import p_text

#: Longest claim read (a linear hypothesis on a few coefficients is a few dozen characters).
MAX_CLAIM_CHARS = 1_000


def check_claims(fit: OlsFit, claims: list[str]) -> list[ClaimTest | FormulaError]:
    """Test each declared claim; an unreadable claim comes back as a :class:`FormulaError`."""
    import patsy  # noqa: PLC0415

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
        out.append(_one(fit, claim, constraint))
    return out


def _one(fit: OlsFit, claim: str, constraint: Any) -> ClaimTest | FormulaError:
    R = np.asarray(constraint.coefs, dtype=float)
    q = np.asarray(constraint.constants, dtype=float).ravel()
    beta = fit.beta if fit.beta_ext is None else fit.beta_ext
    root = fit.xtx_root if fit.root_ext is None else fit.root_ext
    s2 = fit.sigma**2
    k = R.shape[0]
    with np.errstate(all="ignore"):
        try:
            form, u = restriction_quadratic_form(R, q, beta, root)
        except FitError:
            return FormulaError(f"claim {claim!r} repeats or contradicts itself; its restrictions are dependent")
        if k == 1:
            stat = float(np.sign(u[0]) * np.sqrt(form / s2)) if s2 > 0 else float(np.copysign(np.inf, u[0]))
            p = float(2 * dist.t_sf(abs(stat), fit.df_resid)) if np.isfinite(stat) else 0.0
            test, df_num = "t", 1
        else:
            stat = form / (k * s2) if s2 > 0 else float("inf")
            p = dist.f_sf(stat, k, fit.df_resid) if np.isfinite(stat) else 0.0
            test, df_num = "F", k
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
