"""Every published figure on the eleven NIST StRD linear sets, on both extended arithmetics.

Reference: tests/nist_reference.py computes every figure from its textbook formula in 80-digit
mpmath arithmetic on the data the program reads (the Durbin–Watson probability by Imhof's 1961
integral on mpmath's own eigenvalues, 30 digits). The program's figures are the ones the build
publishes (tests/nist_figures.py): coefficients and their inference, every column of
observations.csv (fitted values, residuals, leverage, studentized residuals, Cook's distance,
DFFITS, both intervals), the standardized residuals the charts draw, and every diagnostic's
statistic and p-value (Breusch–Pagan, Durbin–Watson, RESET, lack of fit, Jarque–Bera, Shapiro–Wilk,
variance inflation factors, condition number) and the HC3 standard errors. Each must have at least
nine correct significant digits (per-row values below 1e-6 of their column's largest are measured on
that scale), in long double and in the portable double-double arithmetic alike.

Shapiro–Wilk's reference is Royston's published algorithm (AS R94) carried out in mpmath: the algorithm
is itself an approximation of the exact null distribution, checked against scipy.stats.shapiro in
tests/test_checks.py; here the question is only whether the program evaluates it without losing digits.
"""

from __future__ import annotations

import pytest
from nist_data import ALL_NIST
from nist_figures import KINDS, digits, digits_by_quantity
from nist_reference import reference

from sitegen.stats import ext
from sitegen.stats.claims import check_claims

DIGITS = 9.0


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("name", ALL_NIST)
def test_every_figure_has_nine_correct_digits(name: str, kind: str) -> None:
    got = digits_by_quantity(name, kind)
    short = {q: round(d, 1) for q, d in got.items() if d < DIGITS}
    assert not short, f"{name} ({kind}): fewer than {DIGITS} correct digits: {short}"


@pytest.mark.parametrize("name", ["Filip", "Pontius", "Longley", "NoInt1"])
def test_reference_covers_the_diagnostics(name: str) -> None:
    # The check above can only be as wide as the reference: make sure it holds the residual
    # figures and every diagnostic that applies (lack of fit needs repeated settings: Pontius).
    ref = reference(name)
    keys = set(ref.scalars) | set(ref.rows)
    for key in (
        "residual",
        "leverage",
        "studentized_residual",
        "cooks_distance",
        "dffits",
        "pred_low",
        "breusch_pagan",
        "durbin_watson_p",
        "jarque_bera",
        "shapiro_w",
        "shapiro_p",
        "hc3_std_errors",
        "condition_number",
    ):
        assert key in keys, f"{name}: reference lacks {key}"
    if name != "NoInt1":
        assert "reset_f" in keys
    if name == "Pontius":
        assert "lack_of_fit_f" in keys
    if name in ("Filip", "Longley"):
        assert "vif" in keys


def test_badly_conditioned_long_double_fit_is_made_again_in_double_double() -> None:
    # Filip's scaled condition number (about 5e9, NIST's hardest linear set) is above the limit;
    # Longley's (about 4e4) is not.
    with ext.forced(ext.LONG_DOUBLE):
        assert ext.needs_double_double(5.2e9)
        assert not ext.needs_double_double(4.3e4)
    with ext.forced(ext.DOUBLE_DOUBLE):
        assert not ext.needs_double_double(5.2e9)


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize(
    ("name", "claim", "dropped"),
    [
        ("Filip", "I(x ** 10) = 0", [10]),
        ("Filip", "I(x ** 9) = 0, I(x ** 10) = 0", [9, 10]),
        ("Longley", "x1 = 0, x5 = 0", [1, 5]),
    ],
)
def test_claims_on_hard_data_have_nine_correct_digits(name: str, claim: str, dropped: list[int], kind: str) -> None:
    # Reference: the Wald statistic of "these coefficients are zero" equals the extra-sum-of-squares
    # F = ((SSR_without − SSR) / k) / s² (common practice), both regressions in 80-digit mpmath;
    # t² = F for one restriction.
    import mpmath as mp
    from nist_reference import DIGITS as REF_DIGITS
    from nist_reference import _design, _ssr

    with mp.workdps(REF_DIGITS):
        X, y, _, _ = _design(name)
        full = _ssr(X, y)
        keep = [j for j in range(len(X[0])) if j not in dropped]
        without = _ssr([[row[j] for j in keep] for row in X], y)
        df = len(y) - len(X[0])
        f_ref = float(((without - full) / len(dropped)) / (full / df))
    from nist_figures import fitted_for

    fit = fitted_for(name, kind)
    (found,) = check_claims(fit, [claim])
    assert not isinstance(found, Exception), str(found)
    got = found.statistic**2 if found.test == "t" else found.statistic
    assert digits(got, f_ref) >= DIGITS, f"{name} {claim!r} ({kind}): {got!r} against {f_ref!r}"
