"""The exact null distribution of the Durbin–Watson statistic, by Imhof's method.

Under independent normal errors the residuals are e = Mε (M = I − QQ', Q an
orthonormal basis of the design's columns) and d = e'Ae / e'e with A = D'D, D the
first-difference matrix. Hence

    P(d ≤ c) = P(ε'M(A − cI)Mε ≤ 0) = P(Σ_j (λ_j − c) χ²_1,j ≤ 0),

where λ_1 … λ_ν (ν = n − p) are the eigenvalues of MAM on the residual space
(J. Durbin and G. S. Watson, "Testing for serial correlation in least squares
regression I", Biometrika 37, 1950). The probability that a weighted sum of
independent χ²₁ variables is below 0 is computed by numerical inversion of its
characteristic function as J. P. Imhof gave it ("Computing the distribution of
quadratic forms in normal variables", Biometrika 48, 1961, eq. 3.2):

    P(Σ μ_j χ²_1,j < 0) = ½ − (1/π) ∫₀^∞ sin θ(u) / (u ρ(u)) du,
    θ(u) = ½ Σ arctan(μ_j u),   ρ(u) = Π (1 + μ_j² u²)^¼.

Imhof's real-axis integral loses relative accuracy in the far tail (it is ½ minus
a number near ½), so the same inversion is taken here along a vertical line
through the saddle point of the integrand, as S. O. Rice did ("Distribution of
quadratic forms in normal random variables — evaluation by numerical
integration", SIAM J. Sci. Stat. Comput. 1, 1980; from memory): the integrand is
then smooth, positive near the real axis and of the size of the answer. It is summed
by the trapezoidal rule after v = width · sinh(t), which converges geometrically:
accepted when the sums with steps h and 2h agree to 1e-10 (the finer one is then good
to far more), else with the step halved up to three times until two successive sums
agree (far tails, where the integrand turns over along the line: measured on 75
drifting 5- to 400-row lines, 0.9 ms each instead of 7.4 ms), and only then by scipy's
adaptive quadrature (QUADPACK, about twelve relative digits at any size of p). The
tests check it against Imhof's real-axis integral in 30- to 100-digit mpmath
arithmetic, against Chernoff's bound in the far upper tail, and against Monte Carlo
draws.

Without eigenvalues, for the common designs. A is diagonal in the orthonormal
cosine basis (DCT-II), with eigenvalues a_k = 4 sin²(πk / 2n), k = 0 … n − 1 (the
path graph's Laplacian; common practice). When the part of the design's column
space to be removed from that basis is one direction u — a straight line with an
intercept and no weights (the constant is the eigenvector of a_0 = 0, the other
direction is the centred predictor), or a single column without one — the ν
wanted eigenvalues are those of diag(a) compressed to u⊥, and the determinant of
a compression is det(B) · u'B⁻¹u (the cofactor formula, common practice). So

    Π_j (1 − 2s(λ_j − d)) = Π_k b_k(s) · Σ_k u_k² / b_k(s),   b_k(s) = 1 − 2s(a_k − d),

a closed form in O(n) per point of the integral, the basis change an O(n log n)
FFT; the phase of the last factor is taken from the residual space's side
(its logarithm is continuous along the line because h(t) = Σ u_k² / (a_k − t) maps
the lower half plane into itself). Measured at n = 200: 0.25 ms instead of 1.6 ms
(the eigenvalues alone took 1.3 ms). Over 800 random straight lines (3 to 400 rows,
d across (0, 4)) both routes agree to 3e-13 relative down to p ≈ 1e-40 and to 5e-12
beyond, where this route is the more accurate one (at p ≈ 2e-48: 1e-15 against 2e-12
from Imhof's integral on 90-digit eigenvalues in mpmath; the float64 eigenvalues'
absolute error is what the other route loses there). The tests check it against the
eigenvalue route and against Imhof's integral in mpmath. Other designs (more
directions, weights) use the eigenvalues.

The eigenvalues take O(n³) time, so the exact p-value is computed up to
``EXACT_MAX_ROWS`` rows; above it the checks use Durbin and Watson's beta
approximation with d's exact mean and variance, and the page says so.
"""

from __future__ import annotations

import contextlib
import functools
import itertools
import math
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]

#: Above this many rows the p-value comes from the moment-matched beta approximation.
EXACT_MAX_ROWS = 2000
_REL_TOL = 1e-12
_STEP = 1 / 16  # trapezoid step in t (v = width · sinh t)
_T_MAX = 80.0
_CHUNK = 64
_TAIL = 1e-17  # stop when the integrand has fallen this far below the sum so far
_SETTLED = 1e-10  # relative agreement of the steps h and 2h that counts as converged
_HALVINGS = 3  # times the step may be halved before adaptive quadrature takes over


@functools.cache
def _openblas() -> Any:
    """numpy's own OpenBLAS, if it is one and exposes a thread-local thread count; else None."""
    import ctypes  # noqa: PLC0415 - only where the exact distribution is computed

    folder = Path(np.__file__).resolve().parent.parent / "numpy.libs"
    for path in sorted(folder.glob("lib*openblas*.so*")) if folder.is_dir() else []:
        try:
            lib = ctypes.CDLL(str(path))
            setter = lib.openblas_set_num_threads_local
        except (OSError, AttributeError):
            continue
        setter.argtypes, setter.restype = [ctypes.c_int], ctypes.c_int
        return setter
    return None


@contextlib.contextmanager
def _one_blas_thread() -> Iterator[None]:
    """One BLAS thread for this thread while inside: a 200 × 200 eigenvalue problem is faster on one
    thread, and BLAS threads that spin while another process (the build's other worker) needs the
    core cost that process its time (measured: 2 ms single-threaded, 20 ms of CPU with two threads)."""
    setter = _openblas()
    if setter is None:
        yield
        return
    before = setter(1)
    try:
        yield
    finally:
        setter(before)


def residual_eigenvalues(q: FloatArray) -> FloatArray:
    """The ν = n − p eigenvalues of MAM on the residual space, ascending.

    ``q`` is an orthonormal basis (n × p) of the design's columns (for a weighted
    fit: of the weighted design, whose residuals are the weighted ones).

    With A = D'D, MAM = (DM)'(DM) has the same nonzero eigenvalues as
    (DM)(DM)' = DD' − WW', W = DQ, an (n − 1) × (n − 1) matrix formed from a
    tridiagonal one and a rank-p product; it has p − 1 more zeros than the ν on the
    residual space, and both are positive semidefinite, so the ν wanted are its ν
    largest. (Measured at n = 200: 0.4 ms less than forming MAM itself.)
    """
    q = np.asarray(q, dtype=np.float64)
    n, p = q.shape
    nu = n - p
    if nu <= 0:
        return np.empty(0)
    if n == 1:
        return np.zeros(nu)
    w = np.diff(q, axis=0)  # W = DQ
    inner = -(w @ w.T)
    m = n - 1
    inner.flat[:: m + 1] += 2.0  # DD': 2 on the diagonal, −1 beside it
    inner.flat[1 :: m + 1] -= 1.0
    inner.flat[m :: m + 1] -= 1.0
    with _one_blas_thread():
        values: FloatArray = np.linalg.eigvalsh(inner).astype(np.float64, copy=False)  # ascending
    if nu > m:  # p = 0: no direction of the design to remove, one eigenvalue of A is the zero of the constant
        return np.concatenate([np.zeros(nu - m), values])
    return values[m - nu :]


def prob_below_zero(mu: FloatArray) -> float:
    """P(Σ μ_j χ²_1,j < 0) for independent χ²₁ variables (see the module docstring).

    The inversion integral is taken along the vertical line Re s = c through the saddle
    point c < 0 of M(s)/(−s), M(s) = Π (1 − 2μ_j s)^(−½) the moment generating function:
    P(Q < 0) = (1/π) ∫₀^∞ Re[M(c + iv) / (−(c + iv))] dv. On that line the integrand is
    smooth and of the size of the answer, so the probability keeps its relative accuracy
    in the far tail, where Imhof's real-axis form ½ − (1/π)∫… loses it to cancellation.
    """
    mu = np.asarray(mu, dtype=np.float64)
    mu = mu[mu != 0]
    if mu.size == 0:
        return math.nan
    if bool(np.all(mu > 0)):
        return 0.0
    if bool(np.all(mu < 0)):
        return 1.0
    m = mu / float(np.max(np.abs(mu)))  # the probability does not change with a common positive scale
    left = 0.5 / float(np.min(m))  # M(s) is finite for left < s < 1/(2 max μ); the line runs left of 0

    def k(c: float) -> float:
        return -0.5 * float(np.sum(np.log1p(-2.0 * m * c))) - math.log(-c)

    c = _saddle(m, left)
    width = 1.0 / math.sqrt(float(np.sum(2.0 * m * m / (1.0 - 2.0 * m * c) ** 2)) + 1.0 / (c * c))
    k0 = k(c)

    slope = 2.0 * m / (1.0 - 2.0 * m * c)  # 1 − 2μc > 0 on the whole line

    def integrand(v: FloatArray) -> FloatArray:
        # M(c + iv)/M(c) = Π (1 − i r_j)^(−½), r_j = 2μ_j v / (1 − 2μ_j c): modulus exp(−¼ Σ log(1 + r²)),
        # phase θ = ½ Σ arctan r_j; then Re[M(s)/(−s)] / (M(c)/(−c)) in real arithmetic.
        v = np.asarray(v, dtype=np.float64)
        r = np.multiply.outer(v, slope)
        rho = np.exp(-0.25 * np.sum(np.log1p(r * r), axis=-1))
        theta = 0.5 * np.sum(np.arctan(r), axis=-1)
        return np.asarray(rho * c * c * (-c * np.cos(theta) - v * np.sin(theta)) / (c * c + v * v), dtype=np.float64)

    p = math.exp(k0) / (-c) * _integral(integrand, width) / math.pi
    return min(1.0, max(0.0, p))


def _integral(integrand: Callable[[FloatArray], FloatArray], width: float) -> float:
    """∫₀^∞ integrand: the sinh-trapezoid rule, or adaptive quadrature (QUADPACK) where it does not settle."""
    total = _sinh_trapezoid(integrand, width)
    if total is not None:
        return total
    from scipy import integrate  # noqa: PLC0415 - rarely needed; a plain fit imports no scipy

    total = 0.0
    edges = [0.0, width, 4 * width, 16 * width, 64 * width, math.inf]
    for a, b in itertools.pairwise(edges):
        part: float
        part, _ = integrate.quad(lambda v: float(integrand(np.array([v]))[0]), a, b, epsrel=_REL_TOL, limit=200)
        total += part
    return total


def _saddle(m: FloatArray, left: float) -> float:
    """The minimum c in (left, 0) of K(c) = log M(c) − log(−c), by safeguarded Newton steps.

    K is convex there (a sum of −log of affine functions) and tends to +∞ at both ends, so
    K'(c) = Σ m/(1 − 2mc) − 1/c has one root; Newton steps that leave the bracket are
    replaced by bisection.
    """
    lo, hi = left, 0.0
    c = left / 2
    for _ in range(200):
        denom = 1.0 - 2.0 * m * c
        grad = float(np.sum(m / denom)) - 1.0 / c
        if grad > 0:
            hi = c
        else:
            lo = c
        curv = float(np.sum(2.0 * m * m / (denom * denom))) + 1.0 / (c * c)
        step = c - grad / curv
        nxt = step if lo < step < hi else (lo + hi) / 2
        if abs(nxt - c) <= 1e-15 * abs(c):
            return nxt
        c = nxt
    return c


def _sinh_trapezoid(f: Callable[[FloatArray], FloatArray], width: float) -> float | None:
    """∫₀^∞ f(v) dv by the trapezoidal rule after v = width · sinh(t), or None if it does not settle.

    The substitution turns the integrand's algebraic tail into an exponential one, where
    the trapezoidal rule converges geometrically; the sum with every second node is the
    error estimate. Where that coarser sum is not yet close enough, the step is halved
    (up to ``_HALVINGS`` times, over the same range: the new nodes are the midpoints of
    the old) and each sum is judged against the one before, since an integrand that turns
    over a few times along the line (far tails) needs a finer step than 2h to show that h
    has settled; only then does the caller fall back to adaptive quadrature.
    """
    h = _STEP
    t = np.arange(0.0, _T_MAX, h)
    total_fine, total_coarse = 0.0, 0.0
    for start in range(0, t.size, _CHUNK):
        ti = t[start : start + _CHUNK]
        w = np.full(ti.size, h)
        if start == 0:
            w[0] = h / 2  # the end point t = 0 counts half
        g = f(width * np.sinh(ti)) * width * np.cosh(ti)
        total_fine += float(np.sum(w * g))
        even = (np.arange(start, start + ti.size) % 2) == 0
        total_coarse += float(np.sum((2 * w * g)[even]))
        if abs(g[-1]) <= _TAIL * abs(total_fine) and abs(g[-2]) <= _TAIL * abs(total_fine):
            if abs(total_fine - total_coarse) <= _SETTLED * abs(total_fine):
                return total_fine
            return _halved(f, width, total_fine, h, float(ti[-1]))
    return None


def _halved(f: Callable[[FloatArray], FloatArray], width: float, total: float, h: float, end: float) -> float | None:
    """The trapezoidal sum of :func:`_sinh_trapezoid` with its step halved until two successive sums agree to
    ``_SETTLED`` (T(h/2) = T(h)/2 + (h/2) Σ f at the midpoints, over [0, end]); None if they never do."""
    for _ in range(_HALVINGS):
        mid = np.arange(h / 2, end, h)
        g = f(width * np.sinh(mid)) * width * np.cosh(mid)
        finer = total / 2 + (h / 2) * float(np.sum(g))
        h /= 2
        if abs(finer - total) <= _SETTLED * abs(finer):
            return finer
        total = finer
    return None


def exact_cdf(d: float, q: FloatArray, *, constant_in_span: bool = False) -> float:
    """P(D ≤ d) under independent normal errors: the one-sided p-value for positive autocorrelation.

    ``constant_in_span``: the design's columns span the constant exactly (an intercept, no weights), which
    lets a straight line take the route without eigenvalues (see the module docstring).
    """
    if not math.isfinite(d):
        return math.nan
    one = one_direction(q, constant_in_span=constant_in_span)
    if one is not None:
        p = prob_below_zero_compressed(one[0], one[1], d)
        if p is not None:
            return p
    lam = residual_eigenvalues(q)
    return prob_below_zero(lam - d)


def _cosine_transform(x: FloatArray) -> FloatArray:
    """The orthonormal DCT-II of each column (as ``scipy.fft.dct(x, type=2, norm="ortho", axis=0)``), by numpy's
    FFT of the even extension: y_k = √(2/n) c_k Σ_i x_i cos(πk(2i + 1) / 2n), c_0 = 1/√2, c_k = 1 otherwise."""
    n = x.shape[0]
    spectrum = np.fft.rfft(np.concatenate([x, x[::-1]], axis=0), axis=0)[:n]
    twist = np.exp(-0.5j * np.pi * np.arange(n) / n)
    y: FloatArray = (twist[:, None] * spectrum).real * math.sqrt(0.5 / n)
    y[0] *= math.sqrt(0.5)
    return y


def one_direction(q: FloatArray, *, constant_in_span: bool) -> tuple[FloatArray, FloatArray] | None:
    """(a, w): the eigenvalues a_k of A on the space the design leaves, in the cosine basis, and the squared
    coordinates w_k = u_k² of the one design direction to remove there — or None when there is not exactly one.

    ``q`` is an orthonormal basis of the design's columns. With the constant in its span and two columns, the
    constant's own direction (k = 0, a_0 = 0) goes whole and u is the rest of the span (each column of q without
    its k = 0 coordinate is a multiple of it: the longer one is taken); a single column is u itself.
    """
    q = np.asarray(q, dtype=np.float64)
    n, p = q.shape
    if n - p < 2 or not (p == 1 or (p == 2 and constant_in_span)):
        return None  # (one residual direction: d is its eigenvalue, P(D ≤ d) an atom either route rounds)
    coords = _cosine_transform(q)
    a = 4.0 * np.sin(0.5 * np.pi * np.arange(n) / n) ** 2
    if p == 2:
        rest = coords[1:]
        u = rest[:, int(np.argmax(np.sum(rest * rest, axis=0)))]
        a = a[1:]
    elif constant_in_span:
        return None  # the constant alone: the eigenvalues are a_1 … a_(n−1) themselves (rare; the general route)
    else:
        u = coords[:, 0]
    size = float(u @ u)
    if not size > 0:
        return None
    return a, u * u / size


def prob_below_zero_compressed(a: FloatArray, w: FloatArray, d: float) -> float | None:
    """P(Σ_j (λ_j − d) χ²_1,j < 0) where λ_1 … λ_ν are the eigenvalues of diag(a) compressed to u⊥, w = u² (Σ w = 1).

    The same inversion as :func:`prob_below_zero` along the line through the saddle point, with the product
    over the λ_j written as Π_k b_k(s) · g(s), g(s) = Σ w_k / b_k(s), b_k(s) = 1 − 2s(a_k − d) (module
    docstring). None where this route cannot decide (then the eigenvalues are computed).
    """
    m = np.asarray(a, dtype=np.float64) - d
    big = float(np.max(np.abs(m)))
    if not big > 0:
        return None
    m = m / big  # the probability does not change with a common positive scale
    if bool(np.any(m == 0)):
        return None
    nu = m.size - 1
    # How many λ_j lie below d: one root of h(t) = Σ w/(a − t) between neighbouring poles, none beyond them,
    # so #{λ < t} = #{a < t} − [h(t) < 0].
    h_d = float(np.sum(w / m))
    below = int(np.count_nonzero(m < 0)) - (1 if h_d < 0 else 0)
    if below <= 0:
        return 0.0
    if below >= nu:
        return 1.0
    found = _saddle_compressed(m, w)
    if found is None:
        return None
    c, curv, b, wb, g = found
    width = 1.0 / math.sqrt(curv)
    k0 = -0.5 * (float(np.sum(np.log(np.abs(b)))) + math.log(abs(g))) - math.log(-c)
    slope = 2.0 * m / b
    share = wb / g  # w_k / (b_k(c) g(c))

    def integrand(v: FloatArray) -> FloatArray:
        # Π_k b_k(s)/b_k(c) = Π (1 − i r_k), r_k = 2m_k v / b_k(c), as in prob_below_zero; the factor
        # g(s)/g(c) = Σ share_k / (1 − i r_k) is taken through H = (s/c) g(s)/g(c) = h(t)/h(t_c), whose principal
        # logarithm is the continuous one (H stays in one half plane), and s/c = 1 + iv/c.
        v = np.asarray(v, dtype=np.float64)
        r = np.multiply.outer(v, slope)
        inv = 1.0 / (1.0 + r * r)
        log_rho = -0.25 * np.sum(np.log1p(r * r), axis=-1)
        theta = 0.5 * np.sum(np.arctan(r), axis=-1)
        s_c = 1.0 + 1j * v / c
        big_h = ((inv @ share) + 1j * ((r * inv) @ share)) * s_c
        z = np.exp(log_rho + 1j * theta - 0.5 * (np.log(big_h) - np.log(s_c)))
        return np.asarray(c * c * (-c * z.real - v * z.imag) / (c * c + v * v), dtype=np.float64)

    p = math.exp(k0) / (-c) * _integral(integrand, width) / math.pi
    return min(1.0, max(0.0, p))


def _saddle_compressed(m: FloatArray, w: FloatArray) -> tuple[float, float, FloatArray, FloatArray, float] | None:
    """The saddle point c of K(c) = −½ log Π_j(1 − 2μ_j c) − log(−c) (μ_j = λ_j − d, scaled as m), with K''(c),
    b = 1 − 2mc, w/b and g(c) = Σ w/b there; None if the Newton steps do not settle.

    K'(c) = Σ m/b − ½ g'/g − 1/c and K''(c) = Σ 2m²/b² − ½ (g''/g − (g'/g)²) + 1/c², with g' = Σ 2mw/b² and
    g'' = Σ 8m²w/b³. The line must keep every 1 − 2μ_j c > 0, i.e. no λ_j below t = d + 1/(2c):
    #{b < 0} − [g < 0] = 0. Safeguarded Newton steps in c, as :func:`_saddle`.
    """
    lo, hi = -math.inf, 0.0
    c = 0.25 / float(np.min(m))  # t below every a_k: inside the domain
    for _ in range(200):
        b = 1.0 - 2.0 * m * c
        wb = w / b
        g = float(wb.sum())
        if bool(np.all(b != 0)) and int(np.count_nonzero(b < 0)) == (1 if g < 0 else 0):
            mb = m / b
            g1 = 2.0 * float(wb @ mb) / g
            g2 = 8.0 * float(wb @ (mb * mb)) / g
            grad = float(mb.sum()) - 0.5 * g1 - 1.0 / c
            curv = 2.0 * float(mb @ mb) - 0.5 * (g2 - g1 * g1) + 1.0 / (c * c)
            if grad > 0:
                hi = c
            else:
                lo = c
            step = c - grad / curv if curv > 0 else math.nan
            if abs(step - c) <= 1e-15 * abs(c):
                return (c, curv, b, wb, g) if curv > 0 else None
            nxt = step if lo < step < hi else (lo + hi) / 2 if math.isfinite(lo) else 2.0 * c
        else:  # left of the domain (some 1 − 2μ_j c ≤ 0): the saddle lies to the right
            lo = c
            nxt = (lo + hi) / 2
        c = nxt
    return None
