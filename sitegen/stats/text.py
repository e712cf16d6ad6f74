"""Numbers inside the sentences the statistics modules write (verdicts, conclusions).

Pages round their tables with :mod:`sitegen.report.fmt`; these helpers keep the
sentences written during fitting consistent with it: three significant digits
for p-values (so 0.0496 and 0.0504 never both read "0.05") and a true minus sign.
"""

from __future__ import annotations

import math


def p_text(p: float) -> str:
    """ "p = 0.0496", "p = 0.430" or "p < 0.0001"."""
    if not math.isfinite(p):
        return "p undefined"
    if p < 1e-4:
        return "p < 0.0001"
    if p >= 1:
        return "p = 1"
    decimals = 2 - math.floor(math.log10(p))
    text = f"{p:.{decimals}f}"
    return "p = 1" if float(text) >= 1 else f"p = {text}"


def minus(text: str) -> str:
    """A typographic minus sign in place of the hyphen a number was formatted with."""
    return text.replace("-", "−")
