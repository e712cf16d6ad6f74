"""The portable extended arithmetic (double-double) and the exact Durbin–Watson distribution.

Sources: exactness of TwoSum/TwoProduct is checked with Python's exact rational arithmetic
(fractions.Fraction); double-double operations against mpmath at 50 digits; the Durbin–Watson
probabilities against Imhof's integral in mpmath (tests/nist_reference.py) and Monte Carlo draws.
"""

from __future__ import annotations

import math
from fractions import Fraction

import mpmath as mp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from nist_reference import dw_weights, imhof_below_zero

from sitegen.stats import durbin_watson, ext
from sitegen.stats.checks import model_checks
from sitegen.stats.influence import influence

# TwoProduct is exact while the product neither underflows nor a factor nears overflow (Dekker 1971).
finite = st.floats(min_value=-1e140, max_value=1e140, allow_nan=False, allow_infinity=False).filter(
    lambda v: v == 0 or abs(v) > 1e-140
)


@settings(max_examples=300, deadline=None)
@given(finite, finite)
def test_two_sum_and_two_product_are_exact(a: float, b: float) -> None:
    s, e = ext.two_sum(np.array([a]), np.array([b]))
    assert Fraction(float(s[0])) + Fraction(float(e[0])) == Fraction(a) + Fraction(b)
    p, f = ext.two_product(np.array([a]), np.array([b]))
    assert Fraction(float(p[0])) + Fraction(float(f[0])) == Fraction(a) * Fraction(b)


def _mp(x: ext.DD) -> list[mp.mpf]:
    return [mp.mpf(float(h)) + mp.mpf(float(lo)) for h, lo in zip(x.hi.ravel(), x.lo.ravel(), strict=True)]


def test_double_double_operations_keep_about_thirty_digits() -> None:
    rng = np.random.default_rng(3)
    a = ext.DD(rng.uniform(0.5, 2, 50), rng.uniform(-1, 1, 50) * 1e-17)
    b = ext.DD(rng.uniform(0.5, 2, 50), rng.uniform(-1, 1, 50) * 1e-17)
    with mp.workdps(50):
        A, B = _mp(a), _mp(b)
        for got, want in (
            (a + b, [x + y for x, y in zip(A, B, strict=True)]),
            (a - b, [x - y for x, y in zip(A, B, strict=True)]),
            (a * b, [x * y for x, y in zip(A, B, strict=True)]),
            (a / b, [x / y for x, y in zip(A, B, strict=True)]),
            (ext.sqrt(a), [mp.sqrt(x) for x in A]),
            (a**10, [x**10 for x in A]),
        ):
            for g, w in zip(_mp(got), want, strict=True):
                assert abs(g - w) <= mp.mpf("1e-30") * abs(w)
        total = ext.tree_sum(a)
        assert abs(_mp(total)[0] - mp.fsum(A)) <= mp.mpf("1e-30") * abs(mp.fsum(A))
        M = ext.DD(rng.normal(size=(7, 3)))
        v = ext.DD(rng.normal(size=3))
        Mv = ext.matmul(M, v)
        for i in range(7):
            want_i = mp.fsum(mp.mpf(float(M.hi[i, j])) * mp.mpf(float(v.hi[j])) for j in range(3))
            assert abs(_mp(Mv[i])[0] - want_i) <= mp.mpf("1e-30") * max(abs(want_i), mp.mpf(1))


def test_double_double_leaves_other_functions_to_float64() -> None:
    x = ext.DD(np.array([1.0, 2.0, 4.0]))
    got = np.log(x)
    assert isinstance(got, ext.DD)
    np.testing.assert_allclose(got.to_float(), np.log([1.0, 2.0, 4.0]), rtol=1e-15)


def test_environment_variable_chooses_the_arithmetic(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(ext.ENV, "double-double")
    assert ext.current() == ext.DOUBLE_DOUBLE
    monkeypatch.setenv(ext.ENV, "long-double")
    assert ext.current() == ext.LONG_DOUBLE
    monkeypatch.delenv(ext.ENV)
    assert ext.current() == (ext.LONG_DOUBLE if ext.long_double_is_wide() else ext.DOUBLE_DOUBLE)
    with ext.forced(ext.DOUBLE_DOUBLE):
        assert ext.current() == ext.DOUBLE_DOUBLE


@pytest.mark.parametrize(("shift", "seed"), [(0.3, 1), (1.0, 2), (2.0, 3), (3.2, 4)])
def test_durbin_watson_tail_matches_imhof_in_mpmath(shift: float, seed: int) -> None:
    # Imhof's real-axis integral at 30 digits (mpmath) against the program's saddle-point line;
    # the shifts reach from p ≈ 1e-15 (far tail) to p near 1.
    lam = np.sort(np.random.default_rng(seed).uniform(0, 4, 30))
    got = durbin_watson.prob_below_zero(lam - shift)
    with mp.workdps(30):
        want = float(imhof_below_zero([mp.mpf(float(v)) for v in lam - shift]))
    assert want > 1e-16
    assert got == pytest.approx(want, rel=1e-9)


def test_durbin_watson_exact_p_agrees_with_monte_carlo() -> None:
    # 400,000 seeded draws of independent normal errors through the same design; the exact
    # probability must lie within four binomial standard errors of the simulated share.
    rng = np.random.default_rng(11)
    n = 25
    X = np.column_stack([np.ones(n), np.arange(n, dtype=float), rng.uniform(size=n)])
    q = np.linalg.qr(X)[0]
    M = np.eye(n) - q @ q.T
    E = rng.standard_normal((400_000, n)) @ M
    d_sim = np.sum(np.diff(E, axis=1) ** 2, axis=1) / np.sum(E**2, axis=1)
    for d in (1.2, 1.6, 2.0):
        p = durbin_watson.exact_cdf(d, q)
        share = float(np.mean(d_sim <= d))
        assert abs(p - share) <= 4 * math.sqrt(share * (1 - share) / len(d_sim)) + 1e-6


def test_cosine_transform_is_scipys_orthonormal_dct() -> None:
    # scipy.fft.dct (type II, norm="ortho") is the independent computation of the basis change.
    from scipy import fft

    x = np.random.default_rng(3).normal(size=(37, 2))
    got = durbin_watson._cosine_transform(x)
    np.testing.assert_allclose(got, fft.dct(x, type=2, norm="ortho", axis=0), rtol=0, atol=1e-14)


def _dw_designs() -> list[tuple[str, np.ndarray, bool]]:
    rng = np.random.default_rng(21)
    n = 60
    x = np.sort(rng.uniform(0, 50, n))
    return [
        ("sorted line", np.column_stack([np.ones(n), x]), True),
        ("line in random order", np.column_stack([np.ones(n), rng.permutation(x)]), True),
        # x symmetric about its middle: half the cosine coordinates of u are zero (eigenvalues a_k themselves)
        ("evenly spaced line", np.column_stack([np.ones(n), np.arange(n, dtype=float)]), True),
        ("intercept second", np.column_stack([x, np.ones(n)]), True),
        ("far from zero", np.column_stack([np.ones(n), 1000 + x / 1000]), True),
        ("no intercept", x[:, None], False),
    ]


@pytest.mark.parametrize("case", range(6))
def test_durbin_watson_without_eigenvalues_agrees_with_the_eigenvalue_route(case: int) -> None:
    # The compressed-diagonal route (one design direction in the cosine basis) against the same probability from
    # numpy's eigenvalues of the projected matrix, over the whole range of d (p from about 1e-40 to 1).
    _, X, constant = _dw_designs()[case]
    q = np.linalg.qr(X)[0]
    one = durbin_watson.one_direction(q, constant_in_span=constant)
    assert one is not None
    lam = durbin_watson.residual_eigenvalues(q)
    for d in (0.05, 0.4, 1.0, 1.7, 2.0, 2.5, 3.3, 3.9):
        want = durbin_watson.prob_below_zero(lam - d)
        got = durbin_watson.prob_below_zero_compressed(*one, d)  # this route itself, not the fallback
        assert got is not None
        assert got == pytest.approx(want, rel=1e-10, abs=1e-300)
        assert durbin_watson.exact_cdf(d, q, constant_in_span=constant) == got
    assert durbin_watson.exact_cdf(0.5 * lam[0], q, constant_in_span=constant) == 0.0  # below every eigenvalue
    assert durbin_watson.exact_cdf(lam[-1] + 0.01, q, constant_in_span=constant) == 1.0  # above every one


def test_durbin_watson_without_eigenvalues_matches_imhof_in_mpmath_in_the_far_tail() -> None:
    # Imhof's real-axis integral at 60 digits on mpmath's own eigenvalues of M A M (M from the exact design):
    # p ≈ 1e-25, where the float64 eigenvalues' absolute error already costs the eigenvalue route digits.
    n = 24
    x = [float(v) for v in np.sort(np.random.default_rng(4).uniform(0, 10, n))]
    d = 0.08
    q = np.linalg.qr(np.column_stack([np.ones(n), x]))[0]
    one = durbin_watson.one_direction(q, constant_in_span=True)
    assert one is not None
    got = durbin_watson.prob_below_zero_compressed(*one, d)
    assert got is not None
    with mp.workdps(60):
        X = mp.matrix([[1, mp.mpf(v)] for v in x])
        lam = dw_weights(mp.eye(n) - X * (X.T * X) ** -1 * X.T, 2)
        want = float(imhof_below_zero([v - d for v in lam]))
    assert 1e-40 < want < 1e-15
    assert got == pytest.approx(want, rel=1e-11)


@pytest.mark.slow
def test_durbin_watson_far_tail_with_halved_steps_matches_imhof_in_mpmath() -> None:
    # A 120-row line with residuals that drift (d = 0.05, p ≈ 8e-83): the integrand turns over a few times along
    # the line, so the sums with steps h and 2h disagree and the step is halved until two sums agree (adaptive
    # quadrature took this over before, at several ms and some 12 digits). Imhof's real-axis integral at 100
    # digits on the same float64 eigenvalues checks the quadrature itself.
    n = 120
    x = np.sort(np.random.default_rng(4).uniform(0, 10, n))
    q = np.linalg.qr(np.column_stack([np.ones(n), x]))[0]
    d = 0.05
    lam = durbin_watson.residual_eigenvalues(q)
    got = durbin_watson.prob_below_zero(lam - d)
    with mp.workdps(100):
        want = float(imhof_below_zero([mp.mpf(float(v)) - mp.mpf(d) for v in lam]))
    assert 1e-90 < want < 1e-75
    assert got == pytest.approx(want, rel=1e-13)
    one = durbin_watson.one_direction(q, constant_in_span=True)
    assert one is not None
    assert durbin_watson.prob_below_zero_compressed(*one, d) == pytest.approx(want, rel=1e-11)


def test_durbin_watson_far_upper_tail_is_one_to_rounding() -> None:
    # d far above its mean (residuals that alternate in sign, 342 rows): P(D ≤ d) is 1 less a tail that
    # Chernoff's bound P(Q > 0) ≤ E[exp(sQ)] (common practice) puts below 1e-30, so both routes must give 1 to
    # rounding; adaptive quadrature, which took these over before steps were halved, left errors of 1e-12 to 1e-11.
    n = 342
    x = np.sort(np.random.default_rng(4).uniform(0, 10, n))
    q = np.linalg.qr(np.column_stack([np.ones(n), x]))[0]
    lam = durbin_watson.residual_eigenvalues(q)
    one = durbin_watson.one_direction(q, constant_in_span=True)
    assert one is not None
    for d in (3.6, 3.8):
        mu = lam - d
        s = np.linspace(0.0, 0.5 / float(mu.max()), 2001)[1:-1]
        log_bound = min(-0.5 * float(np.sum(np.log1p(-2.0 * v * mu))) for v in s)
        assert log_bound < math.log(1e-30)
        assert abs(1.0 - durbin_watson.prob_below_zero(mu)) <= 4e-15
        got = durbin_watson.prob_below_zero_compressed(*one, d)
        assert got is not None
        assert abs(1.0 - got) <= 4e-15


def test_durbin_watson_beyond_the_exact_size_says_it_is_approximate() -> None:
    n = durbin_watson.EXACT_MAX_ROWS + 1
    rng = np.random.default_rng(5)
    x = rng.uniform(0, 10, n)
    X = np.column_stack([np.ones(n), x])
    y = 1 + 2 * x + rng.normal(size=n)
    beta = np.linalg.lstsq(X, y, rcond=None)[0]
    e = y - X @ beta
    infl = influence(np.linalg.qr(X)[0], e, n - 2)
    checks = model_checks(X, y, e, X @ beta, terms=("Intercept", "x"), has_intercept=True, infl=infl, alpha=0.05)
    text = next(c.text for c in checks if c.check == "independence")
    assert "approximate" in text
    small = model_checks(
        X[:50],
        y[:50],
        e[:50],
        (X @ beta)[:50],
        terms=("Intercept", "x"),
        has_intercept=True,
        infl=influence(np.linalg.qr(X[:50])[0], e[:50], 48),
        alpha=0.05,
    )
    assert "approximate" not in next(c.text for c in small if c.check == "independence")
