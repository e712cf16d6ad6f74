"""An accurate least-squares solver: column scaling, Householder QR and refinement.

Why not ``numpy.linalg.lstsq`` or statsmodels' default? On ill-conditioned
designs such as high-degree polynomials (NIST StRD's Filip set) the design
matrix itself loses digits when its columns are computed in float64, and a
float64 factorisation loses cond(X)·ε more. Here the design arrives in extended
precision (``np.longdouble``, 64-bit mantissa on x86-64), the columns are scaled
to unit length, the QR factorisation runs in extended precision, and the
solution is refined twice with residuals computed in extended precision. Very
large designs (more than ``EXTENDED_LIMIT`` cells) use a float64 QR with the same
extended-precision refinement, which is ample for the well-conditioned
straight lines such designs are in practice.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError

EXTENDED_LIMIT = 4_000_000  # cells (n × p) solved entirely in extended precision
#: Above this scaled condition number, float64 data carry fewer than ~3 reliable digits.
CONDITION_LIMIT = 1e13
LD = np.longdouble

LDArray = NDArray[np.longdouble]


@dataclass(frozen=True, slots=True)
class Solution:
    """Least-squares solution with the pieces inference needs."""

    beta: NDArray[np.float64]
    xtx_inv: NDArray[np.float64]  # (X'X)^-1, the unscaled covariance
    xtx_root: NDArray[np.float64]  # W = S·R⁻¹, so W W' = (X'X)^-1 and x'(X'X)^-1 x = ||x'W||²
    resid: NDArray[np.float64]
    ssr: float  # residual sum of squares, accumulated in extended precision
    effects: NDArray[np.float64]  # first p entries of Q'y (sequential sums of squares)
    q: NDArray[np.float64]  # thin Q (n × p) of the scaled design, for hat values
    condition: float  # condition number of the column-scaled design


def _householder(A: LDArray) -> tuple[LDArray, list[LDArray]]:
    """In-place Householder QR; returns R (p×p) and the reflectors."""
    _, p = A.shape
    reflectors: list[LDArray] = []
    for k in range(p):
        v = A[k:, k].copy()
        alpha = np.sqrt(np.dot(v, v))
        if alpha == 0:
            reflectors.append(np.zeros_like(v))
            continue
        v[0] += alpha if v[0] >= 0 else -alpha
        v /= np.sqrt(np.dot(v, v))
        A[k:, k:] -= 2 * np.outer(v, v @ A[k:, k:])
        reflectors.append(v)
    return np.triu(A[:p, :p]), reflectors


def _apply_qt(reflectors: list[LDArray], y: LDArray) -> LDArray:
    y = y.copy()
    for k, v in enumerate(reflectors):
        y[k:] -= 2 * v * np.dot(v, y[k:])
    return y


def _apply_q(reflectors: list[LDArray], z: LDArray) -> LDArray:
    z = z.copy()
    for k in range(len(reflectors) - 1, -1, -1):
        v = reflectors[k]
        z[k:] -= 2 * v * np.dot(v, z[k:])
    return z


def _forward_substitute_transposed(R: LDArray, g: LDArray) -> LDArray:
    """Solve R' h = g for upper-triangular R."""
    p = R.shape[0]
    h = np.zeros(p, dtype=R.dtype)
    for i in range(p):
        h[i] = (g[i] - np.dot(R[:i, i], h[:i])) / R[i, i]
    return h


def _refine_augmented(
    Xs: LDArray, y: LDArray, R: LDArray, refl: list[LDArray], b: LDArray, *, steps: int = 4
) -> LDArray:
    """Refine the solution and residual together (Björck's augmented-system refinement).

    Plain refinement of b alone leaves an error of order cond² · ε · ||r||, which
    matters when residuals are large (NIST's Wampler4/5); refining the pair
    (r, b) of  [I X; X' 0][r; b] = [y; 0]  removes it.
    """
    p = R.shape[0]
    r = y - Xs @ b
    for _ in range(steps):
        f = y - r - Xs @ b
        g = -(Xs.T @ r)
        h = _forward_substitute_transposed(R, g)
        d = _apply_qt(refl, f)
        db = _back_substitute(R, d[:p] - h)
        top = np.concatenate([h, d[p:]])
        r = r + _apply_q(refl, top)
        b = b + db
    return b


def _back_substitute(R: LDArray, c: LDArray) -> LDArray:
    p = R.shape[0]
    b = np.zeros(p, dtype=R.dtype)
    for i in range(p - 1, -1, -1):
        b[i] = (c[i] - np.dot(R[i, i + 1 :], b[i + 1 :])) / R[i, i]
    return b


def _check_rank(R: LDArray, terms: tuple[str, ...]) -> None:
    diag = np.abs(np.diag(R)).astype(float)
    tol = max(R.shape) * 1e-13 * (diag.max() if diag.size else 1.0)
    bad = np.flatnonzero(diag <= tol)
    if bad.size:
        name = terms[int(bad[0])]
        raise FitError(
            f"term {name!r} is a linear combination of the terms before it (or constant), "
            "so its coefficient cannot be estimated",
            hint="remove the term, or check whether the predictor varies in these data",
        )


def solve(X: LDArray, y: LDArray, terms: tuple[str, ...]) -> Solution:
    """Solve min ||y − Xb|| for a full-rank design in extended precision."""
    n, p = X.shape
    if p == 0:
        raise FitError("the model has no terms to estimate")
    norms = np.sqrt((X * X).sum(axis=0))
    if not bool(np.all(norms > 0)):
        name = terms[int(np.flatnonzero(norms == 0)[0])]
        raise FitError(f"term {name!r} is zero in every row, so its coefficient cannot be estimated")
    scale = 1 / norms
    Xs = X * scale
    if n * p <= EXTENDED_LIMIT:
        R, refl = _householder(Xs.copy())
        _check_rank(R, terms)
        effects = _apply_qt(refl, y)[:p]
        b = _refine_augmented(Xs, y, R, refl, _back_substitute(R, effects))
    else:
        Xd = Xs.astype(float)
        Qd, Rd = np.linalg.qr(Xd)
        R = Rd.astype(LD)
        _check_rank(R, terms)
        effects = (Qd.T @ y.astype(float)).astype(LD)
        b = _back_substitute(R, effects)
        for _ in range(3):
            r = (y - Xs @ b).astype(float)
            b = b + _back_substitute(R, (Qd.T @ r).astype(LD))
    r = y - Xs @ b
    eye = np.eye(p, dtype=LD)
    R_inv = np.column_stack([_back_substitute(R, eye[:, j]) for j in range(p)])
    unscaled = (R_inv @ R_inv.T) * np.outer(scale, scale)
    Rd_inv = R_inv.astype(float)
    q = Xs.astype(float) @ Rd_inv
    sv = np.linalg.svd(R.astype(float), compute_uv=False)
    condition = float(sv[0] / sv[-1]) if sv[-1] > 0 else float("inf")
    if condition > CONDITION_LIMIT:
        raise FitError(
            f"the design is too ill-conditioned to fit reliably (condition number {condition:.2g} "
            "after scaling columns); any solver's numbers would carry fewer than three reliable digits",
            hint="centre or rescale the predictor, or use fewer or lower-degree terms",
        )
    return Solution(
        beta=(b * scale).astype(float),
        xtx_inv=unscaled.astype(float),
        xtx_root=(R_inv * scale[:, None]).astype(float),
        resid=r.astype(float),
        ssr=float(np.dot(r, r)),
        effects=np.asarray(effects, dtype=float),
        q=q,
        condition=condition,
    )
