"""The digits table: least correct significant digits of every published figure over the eleven NIST StRD
linear sets, for each of the solver's arithmetics (long double, double-double).

Reference: the same figures in 80-digit mpmath arithmetic (tests/nist_reference.py); figures as the build
publishes them (tests/nist_figures.py). A long-double fit above ext.DOUBLE_DOUBLE_CONDITION is made again in
double-double, as the build does; the column "escalated" names the sets where that happened.
Usage: ``python bench/nist_digits.py`` (about a minute: the reference's eigenvalues are computed in mpmath).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

from nist_data import ALL_NIST
from nist_figures import KINDS, digits_by_quantity, escalated


def main() -> None:
    start = time.perf_counter()
    table: dict[str, dict[str, tuple[float, str]]] = {}
    for kind in KINDS:
        for name in ALL_NIST:
            for quantity, d in digits_by_quantity(name, kind).items():
                row = table.setdefault(quantity, {})
                if kind not in row or d < row[kind][0]:
                    row[kind] = (d, name)
    width = max(len(q) for q in table)
    print(f"{'quantity':<{width}}  " + "  ".join(f"{k:>26}" for k in KINDS))
    for quantity in sorted(table):
        cells = []
        for kind in KINDS:
            d, name = table[quantity].get(kind, (float("nan"), "-"))
            cells.append(f"{d:5.1f} ({name})".rjust(26))
        print(f"{quantity:<{width}}  " + "  ".join(cells))
    overall = {k: min(table[q][k][0] for q in table if k in table[q]) for k in KINDS}
    print("least over all figures: " + ", ".join(f"{k} {v:.1f}" for k, v in overall.items()))
    print("long-double fits made again in double-double: " + (", ".join(escalated()) or "none"))
    print(f"({time.perf_counter() - start:.0f} s)")


if __name__ == "__main__":
    main()
