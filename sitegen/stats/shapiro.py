"""The Shapiro–Wilk test of normality, by Royston's algorithm AS R94 (1995).

The same algorithm scipy.stats.shapiro uses (from memory of its published
coefficients; the tests compare statistic and p-value with scipy.stats.shapiro on
normal and skewed samples from 3 to 5000 rows). Written out so that fitting does not
import scipy.stats.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from sitegen.stats.distributions import norm_ppf, norm_sf

_C1 = (0.0, 0.221157, -0.147981, -2.071190, 4.434685, -2.706056)
_C2 = (0.0, 0.042981, -0.293762, -1.752461, 5.682633, -3.582633)
_C3 = (0.5440, -0.39978, 0.025054, -6.714e-4)
_C4 = (1.3822, -0.77857, 0.062767, -0.0020322)
_C5 = (-1.5861, -0.31082, -0.083751, 0.0038915)
_C6 = (-0.4803, -0.082676, 0.0030302)
_G = (-2.273, 0.459)
MAX_ROWS = 5000  # the approximation's validated range


def _poly(c: Sequence[float], x: float) -> float:
    r = 0.0
    for k in reversed(c):
        r = r * x + k
    return r


@functools.lru_cache(maxsize=64)
def _weights(n: int) -> np.ndarray[tuple[int], np.dtype[np.float64]]:
    """Royston's coefficients for the lower half of the ordered sample (positive); they depend on n only.

    The cached array is read-only, so no caller can change it for the next dataset.
    """
    half = n // 2
    if n == 3:
        three = np.array([math.sqrt(0.5)])
        three.flags.writeable = False
        return three
    m_all = norm_ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25))
    m = -m_all[:half]  # positive
    summ2 = float(np.sum(m_all**2))
    ssumm2 = math.sqrt(summ2)
    rsn = 1 / math.sqrt(n)
    a = np.empty(half)
    a[0] = _poly(_C1, rsn) + m[0] / ssumm2
    if n > 5:
        a[1] = m[1] / ssumm2 + _poly(_C2, rsn)
        fac = math.sqrt((summ2 - 2 * m[0] ** 2 - 2 * m[1] ** 2) / (1 - 2 * a[0] ** 2 - 2 * a[1] ** 2))
        a[2:] = m[2:] / fac
    else:
        fac = math.sqrt((summ2 - 2 * m[0] ** 2) / (1 - 2 * a[0] ** 2))
        a[1:] = m[1:] / fac
    a.flags.writeable = False
    return a


def shapiro_wilk(values: ArrayLike) -> tuple[float, float]:
    """(W, p-value) for 3 ≤ n ≤ 5000 values with some spread; raises ``ValueError`` otherwise."""
    x = np.sort(np.asarray(values, dtype=float))
    n = x.size
    if n < 3 or n > MAX_ROWS:
        raise ValueError(f"Shapiro–Wilk needs 3 to {MAX_ROWS} values, not {n}")
    ssq = float(np.sum((x - x.mean()) ** 2))
    if not ssq > 0:
        raise ValueError("Shapiro–Wilk needs values that are not all equal")
    half = n // 2
    a = _weights(n)
    num = float(np.sum(a * (x[::-1][:half] - x[:half])))
    w = min(num * num / ssq, 1.0)
    if n == 3:
        p = (6 / math.pi) * (math.asin(math.sqrt(w)) - math.pi / 3)
        return w, min(max(p, 0.0), 1.0)
    w1 = 1.0 - w
    if w1 <= 0:
        return w, 1.0
    if n <= 11:
        gamma = _poly(_G, n)
        if math.log(w1) >= gamma:
            return w, 0.0
        y = -math.log(gamma - math.log(w1))
        mean, sd = _poly(_C3, n), math.exp(_poly(_C4, n))
    else:
        xx = math.log(n)
        y = math.log(w1)
        mean, sd = _poly(_C5, xx), math.exp(_poly(_C6, xx))
    return w, norm_sf((y - mean) / sd)
