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

The eigenvalues take O(n³) time, so the exact p-value is computed up to
``EXACT_MAX_ROWS`` rows; above it the checks use Durbin and Watson's beta
approximation with d's exact mean and variance, and say so on the page. The
integral is evaluated by scipy's adaptive quadrature (QUADPACK) to an absolute
accuracy near 1e-14, so a p-value has at least nine correct digits down to about
1e-5, and is exact to that absolute size below it. The tests check it against
the same integral in 50-digit mpmath arithmetic on mpmath's own eigenvalues, and
against Monte Carlo draws.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray
from scipy import integrate

FloatArray = NDArray[np.float64]

#: Above this many rows the p-value comes from the moment-matched beta approximation.
EXACT_MAX_ROWS = 2000
_ABS_TOL = 1e-15


def residual_eigenvalues(q: FloatArray) -> FloatArray:
    """The ν = n − p eigenvalues of MAM on the residual space, ascending.

    ``q`` is an orthonormal basis (n × p) of the design's columns (for a weighted
    fit: of the weighted design, whose residuals are the weighted ones).
    """
    q = np.asarray(q, dtype=np.float64)
    n, p = q.shape
    # MAM = A − Q(Q'A) − (AQ)Q' + Q(Q'AQ)Q', with A = D'D tridiagonal (2 inside, 1 at the ends, −1 off).
    A = np.diag(np.full(n, 2.0)) - np.eye(n, k=1) - np.eye(n, k=-1)
    A[0, 0] = A[-1, -1] = 1.0
    if n == 1:
        A[0, 0] = 0.0
    aq = A @ q
    qaq = q.T @ aq
    mam = A - q @ aq.T - aq @ q.T + q @ qaq @ q.T
    mam = (mam + mam.T) / 2
    values = np.linalg.eigvalsh(mam)
    # MAM is zero on the p directions of Q and MAM ≥ 0, so the p smallest eigenvalues are those zeros.
    return np.sort(values)[p:]


def prob_below_zero(mu: FloatArray) -> float:
    """P(Σ μ_j χ²_1,j < 0) for independent χ²₁ variables, by Imhof's formula (see the module docstring)."""
    mu = np.asarray(mu, dtype=np.float64)
    mu = mu[mu != 0]
    if mu.size == 0:
        return math.nan
    if bool(np.all(mu > 0)):
        return 0.0
    if bool(np.all(mu < 0)):
        return 1.0
    scale = float(np.max(np.abs(mu)))
    m = mu / scale  # the probability does not change with a common positive scale

    def integrand(u: float) -> float:
        if u == 0.0:
            return 0.5 * float(np.sum(m))
        mu_u = m * u
        theta = 0.5 * float(np.sum(np.arctan(mu_u)))
        log_rho = 0.25 * float(np.sum(np.log1p(mu_u * mu_u)))
        return math.sin(theta) / u * math.exp(-log_rho)

    # Split at u = 1 (the scale of the largest |μ|) and integrate the tail on [1, ∞) as QUADPACK does.
    head: float
    tail: float
    head, _ = integrate.quad(integrand, 0.0, 1.0, epsabs=_ABS_TOL, epsrel=1e-13, limit=200)
    tail, _ = integrate.quad(integrand, 1.0, math.inf, epsabs=_ABS_TOL, epsrel=1e-13, limit=200)
    p = 0.5 - (head + tail) / math.pi
    return min(1.0, max(0.0, p))


def exact_cdf(d: float, q: FloatArray) -> float:
    """P(D ≤ d) under independent normal errors: the one-sided p-value for positive autocorrelation."""
    if not math.isfinite(d):
        return math.nan
    lam = residual_eigenvalues(q)
    return prob_below_zero(lam - d)
