"""Numbers rounded for reading on the pages, by the one rule of :mod:`sitegen.stats.text`. Downloads keep full
precision.

One rule for significant digits on every page, in sentences, cards, tables and intervals alike: measured
quantities (estimates, intervals, fitted values, scatter, limits, bias) have 4 significant digits, trailing
zeros included; percentages, diagnostic measures and test statistics 3; p-values 3 (below 0.0001 as
"< 0.0001"); counts are exact; limits the user declared are shown as written (:func:`given`).
"""

from __future__ import annotations

import math

from sitegen.stats.text import p_digits, p_text, significant

MISSING = "—"


def _finite(x: object) -> float | None:
    if x is None or isinstance(x, bool) or not isinstance(x, int | float):
        return None
    v = float(x)
    return v if math.isfinite(v) else None


def num(x: object, digits: int = 4) -> str:
    """A number with ``digits`` significant digits; scientific notation only when very large or small."""
    if type(x) is float and math.isfinite(x):  # the common case, first (a page formats some hundred numbers)
        return significant(x, digits)
    if isinstance(x, float) and math.isinf(x):
        return "∞" if x > 0 else "−∞"
    v = _finite(x)
    if v is None:
        return MISSING
    if isinstance(x, int):
        return f"{x:,}".replace("-", "−")
    return significant(v, digits)


def integer(x: object) -> str:
    """A count with thousands separators."""
    v = _finite(x)
    return MISSING if v is None else f"{int(v):,}"


def pvalue(p: object) -> str:
    """A p-value as readers expect it: three significant digits (0.0496, 0.430), or "< 0.0001"."""
    v = _finite(p)
    return MISSING if v is None else p_digits(v)


def p_phrase(p: object) -> str:
    """ "p = 0.0496" or "p < 0.0001", for use in a sentence."""
    v = _finite(p)
    return f"p = {MISSING}" if v is None else p_text(v)


def percent(x: object, digits: int = 1) -> str:
    """A proportion as a percentage; never rounds a value short of 100% (or above 0%) up to 100.0% (or 0.0%)."""
    v = _finite(x)
    if v is None:
        return MISSING
    text = f"{v * 100:.{digits}f}"
    while digits < 8 and ((0 < v < 1 and float(text) >= 100) or (0 < v < 1 and float(text) <= 0)):
        digits += 1
        text = f"{v * 100:.{digits}f}"
    return f"{text}%"


def level(x: object) -> str:
    """A confidence level such as 0.95 as "95%"."""
    v = _finite(x)
    return MISSING if v is None else f"{v * 100:g}%"


def interval(low: object, high: object, digits: int = 4) -> str:
    """A confidence interval as "low to high"."""
    return f"{num(low, digits)} to {num(high, digits)}"


def rsquared(x: object) -> str:
    """R² with enough decimals to tell 0.9999 from 0.99999."""
    v = _finite(x)
    if v is None:
        return MISSING
    if 0.99 < v < 1:
        decimals = min(max(3, 1 - math.floor(math.log10(1 - v)) + 1), 8)
        return f"{v:.{decimals}f}"
    return f"{v:.4f}".replace("-", "−")


def given(x: object) -> str:
    """A number the user wrote (a declared limit or level), shown as written rather than rounded or padded."""
    v = _finite(x)
    if v is None:
        return MISSING
    return f"{v:.12g}".replace("-", "−")
