"""Least squares over rows that arrive in chunks: the triangular factor updated chunk by chunk, then refined.

Method. The R factor of the augmented matrix [X | y] is carried from chunk to chunk: each chunk's rows are
stacked under the current R and the stack is factored again by Householder QR (``[R; X_k] = Q_k R'``), so
memory is one chunk plus a (p+1)×(p+1) triangle. This is the sequential (flat-tree) form of the tall-skinny
QR of J. Demmel, L. Grigori, M. Hoemmen and J. Langou, "Communication-optimal parallel and sequential QR
and LU factorizations", SIAM J. Sci. Comput. 34 (2012) A206–A239, and the row-appending QR update of
G. H. Golub and C. F. Van Loan, *Matrix Computations*, 4th ed. (2013), §6.5. The last column of R holds
Q'y: its first p entries are the effects (sequential sums of squares) and the square of its last entry the
residual sum of squares; with an intercept first, the sum of squares of its entries below the first is the
centred total sum of squares.

Precision. The factorisation runs in the solver's extended arithmetic (:mod:`sitegen.stats.ext`, with
:mod:`sitegen.stats.solver`'s Householder step), on the unscaled design: the solver's column scaling by
powers of two is exact, so it is applied to R afterwards with the same result. A second pass over the data
accumulates X'r and r'r in extended precision (r = y − Xb), and one step of refinement by the corrected
semi-normal equations (R'R d = X'r; Å. Björck, *Numerical Methods for Least Squares Problems*, SIAM 1996,
§2.3.4) gives the estimates the whole-file solver's refinement gives.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FitError
from sitegen.stats.solver import (
    CONDITION_LIMIT,
    Ext,
    Ops,
    _back_substitute,
    _check_rank,
    _condition,
    _forward_substitute_transposed,
    _householder,
)


class RowsQR:
    """The R factor of the rows of [X | y] added so far."""

    def __init__(self, o: Ops, cols: int) -> None:
        self.o = o
        self.cols = cols
        self._r: Ext = None  # the triangle, or (fewer rows than columns so far) the rows themselves
        self._factored = False

    def add(self, rows: Ext) -> None:
        """Add a chunk of rows (m × cols, in the arithmetic of ``o``)."""
        o = self.o
        if rows.shape[0] == 0:
            return
        stack = rows if self._r is None else o.concat([self._r, rows])
        if stack.shape[0] < self.cols:
            self._r = stack.copy()
            return
        self._r, _ = _householder(o, stack.copy())
        self._factored = True

    def triangle(self) -> Ext:
        """R (cols × cols); rows of zeros below when fewer rows than columns were added."""
        o = self.o
        if self._factored:
            return self._r
        out = o.zeros((self.cols, self.cols))
        if self._r is not None:
            R, _ = _householder(o, o.concat([self._r, o.zeros((self.cols, self.cols))]))
            out = R
        return out


@dataclass(frozen=True, slots=True)
class Solved:
    """What the triangle gives before the second pass."""

    scale: NDArray[np.float64]  # the column scaling S (powers of two)
    R: Ext  # R of the scaled design (p × p)
    beta_s: Ext  # coefficients of the scaled design
    effects: Ext  # Q'y, first p entries
    ssr: Ext  # residual sum of squares of the unrefined solution
    yy: Ext  # y'y
    tss_centred: Ext | None  # Σ(y − ȳ)², when the first column is the intercept
    condition: float
    root: Ext  # W = S·R⁻¹
    col_ss_centred: Ext | None  # Σ(x_j − x̄_j)² of every column, when the first column is the intercept


def solve_triangle(o: Ops, T: Ext, terms: tuple[str, ...], *, intercept_first: bool) -> Solved:
    """Coefficients, effects and sums of squares from the triangle T of [X | y] (as :func:`solver.solve`)."""
    p = len(terms)
    norms_f = np.linalg.norm(o.f(T[:, :p]), axis=0)
    if not bool(np.all(norms_f > 0)):
        name = terms[int(np.flatnonzero(norms_f == 0)[0])]
        raise FitError(f"term {name!r} is zero in every row, so its coefficient cannot be estimated")
    scale_f = np.exp2(-np.round(np.log2(norms_f)))
    R = T[:p, :p] * o.of(np.broadcast_to(scale_f, (p, p)).copy())
    _check_rank(o, R, terms)
    effects = T[:p, p]
    beta_s = _back_substitute(o, R, effects)
    last = T[:, p]
    ssr = last[p] * last[p]
    yy = o.dot(last, last)
    tss = None
    col_ss = None
    if intercept_first:
        below = last[1:]
        tss = o.dot(below, below)
        col_ss = o.colsum(T[1:, :p] * T[1:, :p])
    eye = np.eye(p)
    R_inv = o.columns([_back_substitute(o, R, o.of(eye[:, j])) for j in range(p)])
    root = R_inv * o.of(scale_f[:, None].repeat(p, axis=1))
    condition = _condition(o.f(R), o.f(R_inv))
    if condition > CONDITION_LIMIT:
        raise FitError(
            f"the design is too ill-conditioned to fit reliably (condition number {condition:.2g} "
            "after scaling columns); any solver's numbers would carry fewer than three reliable digits",
            hint="centre or rescale the predictor, or use fewer or lower-degree terms",
        )
    return Solved(scale_f, R, beta_s, effects, ssr, yy, tss, condition, root, col_ss)


def refine(o: Ops, solved: Solved, xtr: Ext, rr: Ext) -> tuple[Ext, Ext]:
    """One step of refinement from the second pass's X'r (scaled design) and r'r: (coefficients of the
    scaled design, residual sum of squares), both refined."""
    h = _forward_substitute_transposed(o, solved.R, xtr)
    d = _back_substitute(o, solved.R, h)
    beta_s = solved.beta_s + d
    Rd = o.dot(solved.R, d)
    ssr = rr - o.dot(d, xtr) * 2 + o.dot(Rd, Rd)
    return beta_s, ssr
