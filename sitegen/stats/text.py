"""The rule for rounding numbers for reading, and the numbers inside the sentences the statistics modules write
(verdicts, conclusions).

One rule for significant digits everywhere a number is read, in sentences, cards, tables and intervals alike
(:mod:`sitegen.report.fmt` applies it on the pages; downloads keep full precision): :func:`significant` for
measured quantities and statistics, :func:`p_digits` for p-values (three significant digits, so 0.0496 and
0.0504 never both read "0.05"), and a true minus sign.
"""

from __future__ import annotations

import math

_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def significant(v: float, digits: int = 4) -> str:
    """A finite number with ``digits`` significant digits, trailing zeros kept (they are significant);
    thousands separators; scientific notation only when very large or small; a true minus sign."""
    if v == 0:
        return "0"
    mag = math.floor(math.log10(abs(v)))
    if -4 <= mag < 7:
        decimals = max(digits - 1 - mag, 0)
        text = f"{v:,.{decimals}f}"
    else:
        mantissa, exponent = f"{v:.{digits - 1}e}".split("e")
        text = f"{mantissa} × 10{str(int(exponent)).translate(_SUPERSCRIPT)}"
    return minus(text)


def p_digits(p: float) -> str:
    """A finite p-value as readers expect it: "0.0496", "0.430", "1" or "< 0.0001"."""
    if p < 1e-4:
        return "< 0.0001"
    if p >= 1:
        return "1"
    decimals = 2 - math.floor(math.log10(p))
    text = f"{p:.{decimals}f}"
    return "1" if float(text) >= 1 else text


def p_text(p: float) -> str:
    """ "p = 0.0496", "p = 0.430" or "p < 0.0001", for use in a sentence."""
    if not math.isfinite(p):
        return "p undefined"
    text = p_digits(p)
    return f"p {text}" if text.startswith("<") else f"p = {text}"


def minus(text: str) -> str:
    """A typographic minus sign in place of the hyphen a number was formatted with."""
    return text.replace("-", "−")
