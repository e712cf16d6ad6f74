"""An accurate least-squares solver: column scaling, Householder QR and refinement.

Why not ``numpy.linalg.lstsq`` or statsmodels' default? On ill-conditioned
designs such as high-degree polynomials (NIST StRD's Filip set) the design
matrix itself loses digits when its columns are computed in float64, and a
float64 factorisation loses cond(X)·ε more. Here the design arrives in extended
precision, the columns are scaled to unit length, the QR factorisation runs in
extended precision, and the solution and residuals are refined together
(Björck's augmented system) in extended precision. Everything per row comes from
the same factorisation in the same arithmetic: the residuals (the refined ones),
the thin Q (so the leverages), and W = S·R⁻¹ for x'(X'X)⁻¹x.

The extended arithmetic is :mod:`sitegen.stats.ext`: ``np.longdouble`` where it
is wider than a double (x86-64), double-double elsewhere, or as forced by
``SITEGEN_EXTENDED``. Very large designs (more than ``EXTENDED_LIMIT`` cells) use a
float64 QR with the same extended-precision refinement, which is ample for the
well-conditioned straight lines such designs are in practice.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.stats import ext

EXTENDED_LIMIT = 4_000_000  # cells (n × p) solved entirely in extended precision
#: Up to this many cells (n × p) a solution keeps its extended-precision Q (at most 16 bytes a cell), for the
#: checks' auxiliary regressions to project on (:mod:`sitegen.stats.checks`).
KEEP_Q_CELLS = 200_000
#: Above this scaled condition number, float64 data carry fewer than ~3 reliable digits.
CONDITION_LIMIT = 1e13
LD = np.longdouble

LDArray = NDArray[np.longdouble]
_LD_EPS = float(np.finfo(LD).eps)  # looked up once (np.finfo is not free, and ops() is called often)
#: An array in the solver's extended arithmetic: a long-double ndarray or an :class:`ext.DD`.
Ext = Any


class Ops:
    """The handful of array operations the solver needs, in one extended arithmetic."""

    def __init__(self, kind: str) -> None:
        self.kind = kind
        self.dd = kind == ext.DOUBLE_DOUBLE
        #: unit roundoff of the arithmetic (double-double: about 2⁻¹⁰⁴)
        self.eps = 2.0**-104 if self.dd else _LD_EPS

    def of(self, a: Any) -> Ext:
        if self.dd:
            return ext.DD.of(a)
        if isinstance(a, ext.DD):
            return a.to_longdouble()
        return np.asarray(a, dtype=LD)

    def f(self, a: Ext) -> NDArray[np.float64]:
        """Rounded to float64."""
        if isinstance(a, ext.DD):
            return a.to_float()
        return np.asarray(a, dtype=np.float64)

    def dot(self, a: Ext, b: Ext) -> Ext:
        return ext.matmul(a, b) if self.dd else a @ b

    def sqrt(self, a: Ext) -> Ext:
        return ext.sqrt(a) if self.dd else np.sqrt(a)

    def colsum(self, a: Ext) -> Ext:
        """Sums over rows (axis 0)."""
        return ext.tree_sum(a, axis=0) if self.dd else a.sum(axis=0)

    def rowsum(self, a: Ext) -> Ext:
        """Sums over columns (axis 1)."""
        return ext.tree_sum(a, axis=1) if self.dd else a.sum(axis=1)

    def zeros(self, shape: Any) -> Ext:
        return ext.zeros(shape) if self.dd else np.zeros(shape, dtype=LD)

    def concat(self, parts: list[Ext]) -> Ext:
        return ext.concatenate(parts) if self.dd else np.concatenate(parts)

    def columns(self, cols: list[Ext]) -> Ext:
        return ext.column_stack(cols) if self.dd else np.column_stack(cols)


def ops() -> Ops:
    """The operations of the arithmetic chosen now (:func:`ext.current`)."""
    return Ops(ext.current())


def kind_of(a: Any) -> str:
    """The arithmetic an extended array was made in (a plain array: the one chosen now)."""
    if isinstance(a, ext.DD):
        return ext.DOUBLE_DOUBLE
    if isinstance(a, np.ndarray) and a.dtype == LD:
        return ext.LONG_DOUBLE
    return ext.current()


@dataclass(frozen=True, slots=True)
class Solution:
    """Least-squares solution with the pieces inference needs."""

    beta: NDArray[np.float64]
    xtx_inv: NDArray[np.float64]  # (X'X)^-1, the unscaled covariance
    xtx_root: NDArray[np.float64]  # W = S·R⁻¹, so W W' = (X'X)^-1 and x'(X'X)^-1 x = ||x'W||²
    resid: NDArray[np.float64]  # y − Xb of the system solved (refined, then rounded)
    ssr: float  # residual sum of squares, accumulated in extended precision
    effects: NDArray[np.float64]  # first p entries of Q'y (sequential sums of squares)
    q: NDArray[np.float64]  # thin Q (n × p) of the scaled design, for hat values
    condition: float  # condition number of the column-scaled design
    leverage: NDArray[np.float64]  # hat values, summed in extended precision
    beta_ext: Ext  # the coefficients in extended precision
    resid_ext: Ext  # the refined residuals in extended precision
    root_ext: Ext  # W in extended precision
    q_ext: Ext = None  # thin Q in extended precision, kept for designs up to KEEP_Q_CELLS cells (else None)


def householder_vector(o: Ops, column: Ext) -> Ext | None:
    """The unit vector v whose reflection I − 2vv' empties ``column`` below its first entry, computed in a copy
    (None: the column is zero, and nothing is reflected)."""
    v = column.copy()
    alpha = o.sqrt(o.dot(v, v))
    if float(o.f(alpha)) == 0:
        return None
    v[0] = v[0] + (alpha if float(o.f(v[0])) >= 0 else -alpha)
    return v / o.sqrt(o.dot(v, v))


def _householder(o: Ops, A: Ext) -> tuple[Ext, list[Ext]]:
    """In-place Householder QR; returns R (p×p) and the reflectors.

    Each reflection updates the trailing columns one at a time (``a_j − v·w_j``): the same products and
    differences, element by element, as subtracting the outer product ``v w'`` from the whole block, without
    the two block-sized temporaries that would cost (at a million rows, 16 bytes per row and column each).
    """
    _, p = A.shape
    reflectors: list[Ext] = []
    diagonal: dict[int, Any] = {}
    for k in range(p):
        v = householder_vector(o, A[k:, k])
        if v is None:
            reflectors.append(o.zeros(A[k:, k].shape))
            continue
        w = o.dot(v, A[k:, k:]) * 2
        for j in range(k, p):
            A[k:, j] -= v * w[j - k]
        if o.dd:  # a DD's slice is a copy: keep the reflector itself
            reflectors.append(v)
        else:  # as LAPACK does, the reflector takes the place of the column it emptied (R's diagonal aside)
            diagonal[k] = A[k, k].copy()
            A[k:, k] = v
            reflectors.append(A[k:, k])
    R = A[:p, :p].copy()
    below = np.tril(np.ones((p, p), dtype=bool), -1)
    R[below] = 0
    for k, value in diagonal.items():
        R[k, k] = value
    return R, reflectors


def _apply_qt(o: Ops, reflectors: list[Ext], y: Ext, *, in_place: bool = False) -> Ext:
    """Q' y for a vector (``in_place``: overwriting ``y``, which the caller no longer needs)."""
    if not in_place:
        y = y.copy()
    for k, v in enumerate(reflectors):
        y[k:] -= v * (o.dot(v, y[k:]) * 2)
    return y


def _apply_q(o: Ops, reflectors: list[Ext], z: Ext, *, in_place: bool = False) -> Ext:
    """Q z for a vector, or Q Z for a matrix (column by column, as :func:`_householder`)."""
    if not in_place:
        z = z.copy()
    for k in range(len(reflectors) - 1, -1, -1):
        v = reflectors[k]
        if z.ndim == 1:
            z[k:] -= v * (o.dot(v, z[k:]) * 2)
        else:
            w = o.dot(v, z[k:]) * 2
            for j in range(z.shape[1]):
                z[k:, j] -= v * w[j]
    return z


def _forward_substitute_transposed(o: Ops, R: Ext, g: Ext) -> Ext:
    """Solve R' h = g for upper-triangular R."""
    p = R.shape[0]
    h = o.zeros(p)
    for i in range(p):
        h[i] = (g[i] - o.dot(R[:i, i], h[:i])) / R[i, i]
    return h


def _back_substitute(o: Ops, R: Ext, c: Ext) -> Ext:
    p = R.shape[0]
    b = o.zeros(p)
    for i in range(p - 1, -1, -1):
        b[i] = (c[i] - o.dot(R[i, i + 1 :], b[i + 1 :])) / R[i, i]
    return b


def _refine_augmented(  # noqa: PLR0917 - the factorisation's pieces
    o: Ops, Xs: _Scaled, y: Ext, R: Ext, refl: list[Ext], b: Ext, *, steps: int = 4
) -> tuple[Ext, Ext]:
    """Refine the solution and residual together (Björck's augmented-system refinement).

    Plain refinement of b alone leaves an error of order cond² · ε · ||r||, which
    matters when residuals are large (NIST's Wampler4/5); refining the pair
    (r, b) of  [I X; X' 0][r; b] = [y; 0]  removes it. Returns (b, r).
    """
    p = R.shape[0]
    r = y - Xs.times(b)
    last = math.inf
    for _ in range(steps):
        f = y - r - Xs.times(b)
        g = -Xs.transposed_times(r)
        h = _forward_substitute_transposed(o, R, g)
        d = _apply_qt(o, refl, f, in_place=True)
        del f
        db = _back_substitute(o, R, d[:p] - h)
        top = o.concat([h, d[p:]])
        del d
        dr = _apply_q(o, refl, top, in_place=True)
        del top
        r = r + dr
        b = b + db
        # Settled: the last correction of b is below the arithmetic's own rounding of b; or it is not half the one
        # before (b has reached the rounding noise of the computed residuals, where further steps only move it
        # within that noise: LAPACK's rule for iterative refinement, common practice) while the residuals'
        # correction is below their own rounding.
        size = float(np.max(np.abs(o.f(db))))
        if size <= o.eps * float(np.max(np.abs(o.f(b)))):
            break
        if size > last / 2 and float(np.max(np.abs(o.f(dr)))) <= o.eps * float(np.max(np.abs(o.f(r)))):
            break
        del dr
        last = size
    return b, r


class _Scaled:
    """The column-scaled design X·S (S diagonal, powers of two) without holding it: (X·S)b is X(Sb) and
    (X·S)'r is S(X'r), equal bit for bit, since a product by a power of two is exact."""

    def __init__(self, o: Ops, X: Ext, scale: Ext) -> None:
        self.o, self.X, self.scale = o, X, scale

    def times(self, b: Ext) -> Ext:
        if self.X.ndim == 1:
            return self.X * (self.scale * b)
        return self.o.dot(self.X, self.scale * b)

    def transposed_times(self, r: Ext) -> Ext:
        return self.o.dot(self.X.T, r) * self.scale


ROW_BLOCK = 65_536  # rows of Q squared and summed at a time, for the hat values


def _row_sums_of_squares(o: Ops, Q: Ext) -> NDArray[np.float64]:
    """Σ_j Q_ij² for every row, in the arithmetic of Q, a block of rows at a time (no n × p temporary)."""
    n = Q.shape[0]
    out = np.empty(n)
    for lo in range(0, n, ROW_BLOCK):
        part = Q[lo : lo + ROW_BLOCK]
        out[lo : lo + ROW_BLOCK] = o.f(o.rowsum(part * part))
    return out


def _check_rank(o: Ops, R: Ext, terms: tuple[str, ...]) -> None:
    diag = np.abs(np.diag(o.f(R)))
    tol = max(R.shape) * 1e-13 * (diag.max() if diag.size else 1.0)
    bad = np.flatnonzero(diag <= tol)
    if bad.size:
        name = terms[int(bad[0])]
        raise FitError(
            f"term {name!r} is a linear combination of the terms before it (or constant), "
            "so its coefficient cannot be estimated",
            hint="remove the term, or check whether the predictor varies in these data",
        )


def _condition(R: NDArray[np.float64], R_inv: NDArray[np.float64]) -> float:
    """Condition number of the design with every column scaled to unit length.

    With D the column norms of R (those of the design), it is ‖R D⁻¹‖₂ · ‖D R⁻¹‖₂: two largest
    singular values, which float64 gets to full relative accuracy (the smallest singular value
    of R D⁻¹ itself would carry an error of ε·‖R‖, i.e. cond·ε relative).
    """
    norms = np.linalg.norm(R, axis=0)
    if not bool(np.all(norms > 0)):
        return float("inf")
    big = np.linalg.svd(R / norms, compute_uv=False)
    inv = np.linalg.svd(R_inv * norms[:, None], compute_uv=False)
    if not (big.size and inv.size) or not np.isfinite(inv[0]):
        return float("inf")
    return float(big[0] * inv[0])


def solve(X: Any, y: Any, terms: tuple[str, ...]) -> Solution:
    """Solve min ||y − Xb|| for a full-rank design in extended precision.

    ``X`` and ``y`` may be float64, long double or :class:`ext.DD` arrays; they are
    taken into the arithmetic of :func:`ext.current`.
    """
    o = ops()
    X, y = o.of(X), o.of(y)
    n, p = X.shape
    if p == 0:
        raise FitError("the model has no terms to estimate")
    norms = o.sqrt(o.colsum(X * X))
    norms_f = o.f(norms)
    if not bool(np.all(norms_f > 0)):
        name = terms[int(np.flatnonzero(norms_f == 0)[0])]
        raise FitError(f"term {name!r} is zero in every row, so its coefficient cannot be estimated")
    # Scale by powers of two near 1/‖column‖: exact in any arithmetic, so X·S carries X's digits unchanged.
    scale_f = np.exp2(-np.round(np.log2(norms_f)))
    scale = o.of(scale_f)
    # X·S is formed once, for the factorisation to work on in place; elsewhere products with it are taken as
    # products with X and S (exact, S being powers of two), so that no second scaled copy is held.
    scaled = _Scaled(o, X, scale)
    if n * p <= EXTENDED_LIMIT:
        R, refl = _householder(o, X * (scale if X.ndim == 1 else _row(o, scale)))
        _check_rank(o, R, terms)
        effects = _apply_qt(o, refl, y)[:p]
        b, r = _refine_augmented(o, scaled, y, R, refl, _back_substitute(o, R, effects))
        eye_n = o.zeros((n, p))
        for j in range(p):
            eye_n[j, j] = o.of(1.0)
        Q = _apply_q(o, refl, eye_n, in_place=True)
        del refl
    else:
        Qd, Rd = np.linalg.qr(o.f(X * (scale if X.ndim == 1 else _row(o, scale))))
        R = o.of(Rd)
        _check_rank(o, R, terms)
        effects = o.of(Qd.T @ o.f(y))
        b = _back_substitute(o, R, effects)
        for _ in range(3):
            rd = o.f(y - scaled.times(b))
            b = b + _back_substitute(o, R, o.of(Qd.T @ rd))
        r = y - scaled.times(b)
        Q = o.of(Qd)
        del Qd
    eye = np.eye(p)
    R_inv = o.columns([_back_substitute(o, R, o.of(eye[:, j])) for j in range(p)])
    root = R_inv * o.of(scale_f[:, None])  # S·R⁻¹
    unscaled = o.dot(root, root.T)
    Rf, R_inv_f = o.f(R), o.f(R_inv)
    condition = _condition(Rf, R_inv_f)
    if condition > CONDITION_LIMIT:
        raise FitError(
            f"the design is too ill-conditioned to fit reliably (condition number {condition:.2g} "
            "after scaling columns); any solver's numbers would carry fewer than three reliable digits",
            hint="centre or rescale the predictor, or use fewer or lower-degree terms",
        )
    beta = b * scale
    return Solution(
        beta=o.f(beta),
        xtx_inv=o.f(unscaled),
        xtx_root=o.f(root),
        resid=o.f(r),
        ssr=float(o.f(o.dot(r, r))),
        effects=o.f(effects),
        q=o.f(Q),
        condition=condition,
        leverage=_row_sums_of_squares(o, Q),
        beta_ext=beta,
        resid_ext=r,
        root_ext=root,
        q_ext=Q if n * p <= min(KEEP_Q_CELLS, EXTENDED_LIMIT) else None,
    )


def residual_ss(X: Any, y: Any, terms: tuple[str, ...]) -> float:
    """The residual sum of squares of min ||y − Xb||, by the same scaled, refined solver.

    For auxiliary regressions (test statistics) that need nothing else: the same
    column scaling, extended-precision Householder QR, rank check and augmented
    refinement as :func:`solve`, without the inverse, Q or condition number.
    Raises :class:`FitError` for a rank-deficient design.
    """
    o = ops()
    X, y = o.of(X), o.of(y)
    p = X.shape[1]
    norms_f = o.f(o.sqrt(o.colsum(X * X)))
    if p == 0 or not bool(np.all(norms_f > 0)):
        raise FitError("an auxiliary regression has a zero or missing column")
    scale = o.of(np.exp2(-np.round(np.log2(norms_f))))
    R, refl = _householder(o, X * _row(o, scale))
    _check_rank(o, R, terms)
    effects = _apply_qt(o, refl, y)[:p]
    _, r = _refine_augmented(o, _Scaled(o, X, scale), y, R, refl, _back_substitute(o, R, effects))
    return float(o.f(o.dot(r, r)))


def restriction_quadratic_form(
    R: NDArray[np.float64], q: NDArray[np.float64], beta: Ext, root: Ext
) -> tuple[float, NDArray[np.float64]]:
    """u'(R W W' R')⁻¹u with u = R b − q, for restrictions R b = q, in extended precision.

    ``root`` is W (W W' = (X'X)⁻¹) and ``beta`` b, both in the solver's arithmetic. The
    form is ‖T⁻ᵀu‖² with T from a Householder QR of (R W)' (so T'T = R W W' R'); dependent
    restrictions raise :class:`FitError`. Returns the form and u (rounded).
    """
    o = Ops(kind_of(beta))
    beta, root = o.of(beta), o.of(root)
    Re = o.of(R)
    u = o.dot(Re, beta) - o.of(q)
    A = o.dot(Re, root).T  # p × k
    k = A.shape[1]
    T, _ = _householder(o, A.copy())
    _check_rank(o, T, tuple(f"restriction {j + 1}" for j in range(k)))
    h = _forward_substitute_transposed(o, T, u)
    return float(o.f(o.dot(h, h))), o.f(u)


def _row(o: Ops, v: Ext) -> Ext:
    """A vector as a 1 × p row, for broadcasting over the rows of a matrix."""
    if o.dd:
        return ext.DD(v.hi[None, :], v.lo[None, :])
    return v[None, :]
