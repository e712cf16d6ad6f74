"""Extended-precision arithmetic for the solver: long double where it is wide, double-double elsewhere.

On x86-64 Linux ``np.longdouble`` is the 80-bit x87 format (64-bit mantissa, about
19 digits); on many other platforms (Windows, macOS on Arm, most Arm Linux builds)
it is a plain double, and an accurate solver written for it silently drops to
float64 accuracy (about 7 digits on NIST's Filip). This module gives the solver
one small set of operations over two kinds of arrays:

- :data:`LONG_DOUBLE`: ``np.longdouble`` arrays, used where they have at least 63
  mantissa bits;
- :data:`DOUBLE_DOUBLE`: :class:`DD` arrays, an unevaluated sum ``hi + lo`` of two
  float64 arrays (about 32 digits), built from error-free transformations:
  Knuth's TwoSum, Dekker's FastTwoSum, and Dekker's TwoProduct with Veltkamp's
  split (T. J. Dekker, "A floating-point technique for extending the available
  precision", Numer. Math. 18, 1971; the add, multiply, divide and square-root
  formulas follow Y. Hida, X. S. Li and D. H. Bailey, "Library for double-double
  and quad-double arithmetic", 2007). numpy has no vectorised fused multiply-add,
  hence the split; it is exact unless a factor exceeds about 1e300 in magnitude or
the product underflows (below about 1e-290).

Why hand-written: no kept library offers vectorised double-double arrays for
numpy (mpmath is exact but some thousand times slower per operation, measured on
the NIST Filip fit). Sums over long axes use pairwise (tree) reduction in
double-double, so an n-term sum costs log2(n) vectorised steps.

Which arithmetic is used: :func:`current` — the environment variable
``SITEGEN_EXTENDED`` (``long-double`` or ``double-double``) when set, else long
double when it is wide enough, else double-double. Tests force the portable path
on this machine with ``SITEGEN_EXTENDED=double-double`` (or :func:`forced`). A
long-double fit whose design is badly conditioned (above
``DOUBLE_DOUBLE_CONDITION``) is made again in double-double
(:func:`needs_double_double`), design included: long double's 19 digits less the
condition number's would leave too few.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

F64 = NDArray[np.float64]
ENV = "SITEGEN_EXTENDED"
LONG_DOUBLE = "long-double"
DOUBLE_DOUBLE = "double-double"
#: Mantissa bits a long double needs to count as extended (the x87 format has 63 stored + 1).
WIDE_MANTISSA = 63
_SPLIT = 134217729.0  # 2**27 + 1, Veltkamp's splitting constant for float64

_forced: list[str] = []


def long_double_is_wide() -> bool:
    """Whether ``np.longdouble`` carries more digits than a double on this platform."""
    return int(np.finfo(np.longdouble).nmant) >= WIDE_MANTISSA


def current() -> str:
    """The arithmetic the solver uses now (see the module docstring)."""
    if _forced:
        return _forced[-1]
    chosen = os.environ.get(ENV, "").strip().lower()
    if chosen == DOUBLE_DOUBLE:
        return DOUBLE_DOUBLE
    if chosen == LONG_DOUBLE or long_double_is_wide():
        return LONG_DOUBLE
    return DOUBLE_DOUBLE


#: Above this condition number a long-double fit is done again in double-double: long double's
#: ε ≈ 1.1e-19 times the condition number (and the rounding of the design's own columns, such as
#: x**10, in long double) would otherwise leave fewer than about ten correct digits per row.
DOUBLE_DOUBLE_CONDITION = 1e6


def needs_double_double(condition: float) -> bool:
    """Whether a fit made now, with this scaled condition number, should be made again in double-double."""
    return current() == LONG_DOUBLE and math.isfinite(condition) and condition > DOUBLE_DOUBLE_CONDITION


@contextmanager
def forced(kind: str) -> Iterator[None]:
    """Use ``kind`` (LONG_DOUBLE or DOUBLE_DOUBLE) inside the block, whatever the platform."""
    if kind not in (LONG_DOUBLE, DOUBLE_DOUBLE):
        raise ValueError(f"unknown arithmetic {kind!r}")
    _forced.append(kind)
    try:
        yield
    finally:
        _forced.pop()


# --- error-free transformations -------------------------------------------------------------------


def two_sum(a: F64, b: F64) -> tuple[F64, F64]:
    """s + e = a + b exactly, s = fl(a + b) (Knuth)."""
    s = a + b
    bb = s - a
    return s, (a - (s - bb)) + (b - bb)


def fast_two_sum(a: F64, b: F64) -> tuple[F64, F64]:
    """s + e = a + b exactly when |a| ≥ |b| or a = 0 (Dekker)."""
    s = a + b
    return s, b - (s - a)


def _split(a: F64) -> tuple[F64, F64]:
    t = _SPLIT * a
    hi = t - (t - a)
    return hi, a - hi


def two_product(a: F64, b: F64) -> tuple[F64, F64]:
    """p + e = a · b exactly, p = fl(a · b) (Dekker's TwoProduct with Veltkamp's split)."""
    p = a * b
    ah, al = _split(a)
    bh, bl = _split(b)
    return p, ((ah * bh - p) + ah * bl + al * bh) + al * bl


def _clean(hi: F64, lo: F64) -> tuple[F64, F64]:
    """Where hi is not finite, lo is 0 (so infinities and NaN pass through as in float64)."""
    bad = ~np.isfinite(hi)
    if bool(bad.any()):
        lo = np.where(bad, 0.0, lo)
    return hi, lo


class DD:
    """An array of double-double numbers: the unevaluated sums ``hi + lo`` (|lo| ≤ ulp(hi)/2)."""

    __slots__ = ("hi", "lo")
    __array_priority__ = 1000  # so that ndarray ∘ DD defers to DD's reflected operators

    def __init__(self, hi: ArrayLike, lo: ArrayLike | None = None) -> None:
        self.hi: F64 = np.array(hi, dtype=np.float64)
        self.lo: F64 = np.zeros_like(self.hi) if lo is None else np.array(lo, dtype=np.float64)

    # -- conversion --------------------------------------------------------------------------------
    @classmethod
    def of(cls, value: Any) -> DD:
        """A DD from a DD, a float or integer array, or a long-double array (split exactly)."""
        if isinstance(value, DD):
            return value
        arr = np.asarray(value)
        if arr.dtype == np.longdouble:
            hi = arr.astype(np.float64)
            return cls(hi, (arr - hi.astype(np.longdouble)).astype(np.float64))
        return cls(arr.astype(np.float64))

    def to_float(self) -> F64:
        return self.hi + self.lo

    def to_longdouble(self) -> NDArray[np.longdouble]:
        return self.hi.astype(np.longdouble) + self.lo.astype(np.longdouble)

    def astype(self, dtype: Any) -> Any:
        """``DOUBLE_DOUBLE`` keeps the pair; a numpy type rounds (to float64 or long double)."""
        if isinstance(dtype, str) and dtype == DOUBLE_DOUBLE:
            return self
        if np.dtype(dtype) == np.longdouble:
            return self.to_longdouble()
        return self.to_float().astype(dtype)

    # -- shape -------------------------------------------------------------------------------------
    @property
    def shape(self) -> tuple[int, ...]:
        return self.hi.shape

    @property
    def ndim(self) -> int:
        return self.hi.ndim

    @property
    def size(self) -> int:
        return int(self.hi.size)

    def __len__(self) -> int:
        return len(self.hi)

    @property
    def T(self) -> DD:  # noqa: N802 - numpy's name
        return DD(self.hi.T, self.lo.T)

    def copy(self) -> DD:
        return DD(self.hi.copy(), self.lo.copy())

    def __getitem__(self, key: Any) -> DD:
        return DD(self.hi[key], self.lo[key])

    def __setitem__(self, key: Any, value: Any) -> None:
        v = DD.of(value)
        self.hi[key] = v.hi
        self.lo[key] = v.lo

    def reshape(self, *shape: Any) -> DD:
        return DD(self.hi.reshape(*shape), self.lo.reshape(*shape))

    def __repr__(self) -> str:
        return f"DD(hi={self.hi!r}, lo={self.lo!r})"

    # -- arithmetic --------------------------------------------------------------------------------
    def __neg__(self) -> DD:
        return DD(-self.hi, -self.lo)

    def __add__(self, other: Any) -> DD:
        b = DD.of(other)
        s, e = two_sum(self.hi, b.hi)
        t, f = two_sum(self.lo, b.lo)
        e = e + t
        s, e = fast_two_sum(s, e)
        e = e + f
        return DD(*_clean(*fast_two_sum(s, e)))

    __radd__ = __add__

    def __sub__(self, other: Any) -> DD:
        return self + (-DD.of(other))

    def __rsub__(self, other: Any) -> DD:
        return DD.of(other) + (-self)

    def __mul__(self, other: Any) -> DD:
        b = DD.of(other)
        p, e = two_product(self.hi, b.hi)
        e = e + (self.hi * b.lo + self.lo * b.hi)
        return DD(*_clean(*fast_two_sum(p, e)))

    __rmul__ = __mul__

    def __truediv__(self, other: Any) -> DD:
        b = DD.of(other)
        with np.errstate(divide="ignore", invalid="ignore"):
            q1 = self.hi / b.hi
            r = self - b * DD(q1)
            q2 = r.hi / b.hi
            r = r - b * DD(q2)
            q3 = r.hi / b.hi
            q1, q2 = fast_two_sum(q1, q2)
            out = DD(q1, q2) + DD(q3)
        return DD(*_clean(out.hi, out.lo))

    def __rtruediv__(self, other: Any) -> DD:
        return DD.of(other) / self

    def __pow__(self, k: Any) -> DD:
        """Integer powers by repeated squaring (each step exact to double-double rounding)."""
        if isinstance(k, int | np.integer) or (isinstance(k, float) and k.is_integer() and abs(k) <= 64):
            n = int(k)
            result = DD(np.ones_like(self.hi))
            base = self
            m = abs(n)
            while m:
                if m & 1:
                    result = result * base
                base = base * base
                m >>= 1
            return DD(1.0) / result if n < 0 else result
        if isinstance(k, float) and k == 0.5:
            return sqrt(self)
        with np.errstate(all="ignore"):
            return DD(np.power(self.to_float(), np.asarray(k, dtype=np.float64)))

    def __matmul__(self, other: Any) -> DD:
        return matmul(self, DD.of(other))

    def __rmatmul__(self, other: Any) -> DD:
        return matmul(DD.of(other), self)

    # comparisons and ufuncs look at the rounded value; arithmetic ufuncs stay in double-double
    def __array_ufunc__(self, ufunc: Any, method: str, *inputs: Any, **kwargs: Any) -> Any:
        if method != "__call__" or kwargs.get("out") is not None:
            return NotImplemented
        ops: dict[Any, Any] = {
            np.add: lambda a, b: DD.of(a) + b,
            np.subtract: lambda a, b: DD.of(a) - b,
            np.multiply: lambda a, b: DD.of(a) * b,
            np.true_divide: lambda a, b: DD.of(a) / b,
            np.power: lambda a, b: DD.of(a) ** (b.item() if np.ndim(b) == 0 else b),
            np.negative: lambda a: -DD.of(a),
            np.positive: DD.of,
            np.sqrt: lambda a: sqrt(DD.of(a)),
            np.square: lambda a: DD.of(a) * DD.of(a),
            np.absolute: lambda a: absolute(DD.of(a)),
        }
        if ufunc in ops:
            return ops[ufunc](*inputs)
        # any other function (log, exp, sin, ...) is computed on the rounded float64 value
        plain = [x.to_float() if isinstance(x, DD) else x for x in inputs]
        result = ufunc(*plain, **kwargs)
        if isinstance(result, np.ndarray) and result.dtype.kind == "f":
            return DD(result)
        return result


# --- functions on DD arrays -----------------------------------------------------------------------


def sqrt(a: DD) -> DD:
    """Square root to double-double accuracy (one Newton step on the float64 root)."""
    with np.errstate(all="ignore"):
        x = np.sqrt(a.hi)
        sq_hi, sq_lo = two_product(x, x)
        resid = DD(a.hi, a.lo) - DD(sq_hi, sq_lo)
        corr = np.where(x > 0, resid.hi / (2 * x), 0.0)
        hi, lo = fast_two_sum(x, corr)
    return DD(*_clean(hi, lo))


def absolute(a: DD) -> DD:
    neg = a.hi < 0
    return DD(np.where(neg, -a.hi, a.hi), np.where(neg, -a.lo, a.lo))


def tree_sum(a: DD, axis: int = 0) -> DD:
    """Sum along ``axis`` in double-double by pairwise reduction (log2(n) vectorised steps)."""
    hi = np.moveaxis(a.hi, axis, 0)
    lo = np.moveaxis(a.lo, axis, 0)
    if hi.shape[0] == 0:
        return DD(np.zeros(hi.shape[1:]))
    x = DD(hi, lo)
    while x.shape[0] > 1:
        m = x.shape[0]
        half = m // 2
        paired = x[: 2 * half : 2] + x[1 : 2 * half : 2]
        x = DD(np.concatenate([paired.hi, x.hi[2 * half :]]), np.concatenate([paired.lo, x.lo[2 * half :]]))
    return x[0]


def matmul(a: DD, b: DD) -> DD:
    """Matrix product in double-double: exact products, pairwise sums."""
    vec_a, vec_b = a.ndim == 1, b.ndim == 1
    A = a.reshape(1, -1) if vec_a else a
    B = b.reshape(-1, 1) if vec_b else b
    if A.shape[1] != B.shape[0]:
        raise ValueError(f"shapes {a.shape} and {b.shape} do not align")
    n, k = A.shape
    m = B.shape[1]
    if k == 0:
        out = DD(np.zeros((n, m)))
    elif n * k * m <= 4_000_000:
        prod = DD(A.hi[:, :, None], A.lo[:, :, None]) * DD(B.hi[None, :, :], B.lo[None, :, :])
        out = tree_sum(prod, axis=1)
    else:  # bound the memory: one output column at a time
        cols = [tree_sum(A * DD(B.hi[:, j][None, :], B.lo[:, j][None, :]), axis=1) for j in range(m)]
        out = DD(np.stack([c.hi for c in cols], axis=1), np.stack([c.lo for c in cols], axis=1))
    if vec_a and vec_b:
        return out[0, 0]
    if vec_a:
        return out[0]
    if vec_b:
        return out[:, 0]
    return out


def zeros(shape: Any) -> DD:
    return DD(np.zeros(shape))


def concatenate(parts: list[DD]) -> DD:
    return DD(np.concatenate([p.hi for p in parts]), np.concatenate([p.lo for p in parts]))


def column_stack(cols: list[DD]) -> DD:
    return DD(np.column_stack([c.hi for c in cols]), np.column_stack([c.lo for c in cols]))


def broadcast_to(a: DD, shape: tuple[int, ...]) -> DD:
    return DD(np.broadcast_to(a.hi, shape), np.broadcast_to(a.lo, shape))
