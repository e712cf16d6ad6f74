"""The memory-lean in-memory path gives the same figures, bit for bit, as the block formulation it replaced.

The solver used to update the trailing block of a Householder QR (and of Q) by subtracting an outer
product, which costs two block-sized temporaries; it now updates one column at a time. The reference below
is the former block formulation, written out here (its Householder vectors are the solver's own
``householder_vector``: what is compared is how the block is updated); every result of the solver must
equal it exactly, in both extended arithmetics (long double and double-double), on tall designs like a
logger's and on NIST StRD Longley (tests/data/nist/), whose columns are badly scaled.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest

from sitegen.derive import replicated_settings
from sitegen.formula import build_design
from sitegen.stats import ext, solver
from sitegen.stats.solver import Ops
from sitegen.table import from_columns


def _block_householder(o: Ops, A: Any) -> tuple[Any, list[Any]]:
    """The former formulation: the whole trailing block minus the outer product v (2 v'A)."""
    _, p = A.shape
    reflectors = []
    for k in range(p):
        v = solver.householder_vector(o, A[k:, k])  # the same vectors: the update of the block is compared
        if v is None:
            reflectors.append(o.zeros(A[k:, k].shape))
            continue
        block = A[k:, k:]
        w = o.dot(v, block) * 2
        outer = ext.DD(v.hi[:, None], v.lo[:, None]) * ext.DD(w.hi[None, :], w.lo[None, :]) if o.dd else np.outer(v, w)
        A[k:, k:] = block - outer
        reflectors.append(v)
    R = A[:p, :p].copy()
    R[np.tril(np.ones((p, p), dtype=bool), -1)] = 0
    return R, reflectors


def _block_apply_q(o: Ops, reflectors: list[Any], Z: Any) -> Any:
    Z = Z.copy()
    for k in range(len(reflectors) - 1, -1, -1):
        v = reflectors[k]
        w = o.dot(v, Z[k:]) * 2
        outer = ext.DD(v.hi[:, None], v.lo[:, None]) * ext.DD(w.hi[None, :], w.lo[None, :]) if o.dd else np.outer(v, w)
        Z[k:] = Z[k:] - outer
    return Z


def _same(a: Any, b: Any) -> bool:
    if isinstance(a, ext.DD):
        return bool(np.array_equal(a.hi, b.hi) and np.array_equal(a.lo, b.lo))
    return bool(np.array_equal(np.asarray(a), np.asarray(b)))


def _designs() -> list[np.ndarray]:
    rng = np.random.default_rng(18)
    x = rng.uniform(0, 50, 3000).round(6)
    line = np.column_stack([np.ones_like(x), x])
    cubic = np.column_stack([np.ones_like(x), x, x**2, x**3])
    longley = np.loadtxt("tests/data/nist/Longley.dat", skiprows=60)[:, 1:]
    return [line, cubic, np.column_stack([np.ones(len(longley)), longley])]


@pytest.mark.parametrize("kind", [ext.LONG_DOUBLE, ext.DOUBLE_DOUBLE])
def test_column_updates_equal_the_block_formulation_bit_for_bit(kind: str) -> None:
    if kind == ext.LONG_DOUBLE and not ext.long_double_is_wide():
        pytest.skip("long double is a double here; the double-double case covers the arithmetic")
    o = Ops(kind)
    for X in _designs():
        A = o.of(X)
        R_new, refl_new = solver._householder(o, A.copy())
        R_old, refl_old = _block_householder(o, A.copy())
        assert _same(R_new, R_old)
        assert all(_same(a, b) for a, b in zip(refl_new, refl_old, strict=True))
        eye = o.zeros(X.shape)
        for j in range(X.shape[1]):
            eye[j, j] = o.of(1.0)
        assert _same(solver._apply_q(o, refl_new, eye), _block_apply_q(o, refl_old, eye))
        z = o.of(np.linspace(-1, 1, X.shape[0]))
        assert _same(solver._apply_q(o, refl_new, z), solver._apply_q(o, refl_old, z))


def test_replicated_settings_of_one_predictor_group_as_rows_do() -> None:
    """One predictor's repeated settings are found by sorting its values; the row-wise grouping numpy does for
    several columns (``np.unique(axis=0)``) is the reference, with repeats, a signed zero and a lone value."""
    rng = np.random.default_rng(3)
    x = np.concatenate([rng.choice([0.5, 1.0, 2.0, 4.0], 200), [-0.0, 0.0, 7.25, 1e-300, 3.0, 3.0]])
    y = 2 * x + rng.normal(0, 0.1, len(x))
    design = build_design("y ~ x", from_columns({"x": x, "y": y}), "r.csv")
    _, inverse, counts = np.unique(design.X[:, [1]], axis=0, return_inverse=True, return_counts=True)
    expected = counts[np.ravel(inverse)] > 1
    got = replicated_settings(design)
    assert np.array_equal(got, expected)
    assert got[-6]  # -0.0 and 0.0 are the same setting
    assert got[-5]
    assert not got[-4]  # 7.25 and 1e-300 are alone
    assert not got[-3]
    assert got[-1]
