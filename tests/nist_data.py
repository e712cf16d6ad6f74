"""NIST StRD linear-regression reference cases, for parametrised tests.

Source: NIST/ITL Statistical Reference Datasets (StRD), linear least squares
regression, https://www.itl.nist.gov/div898/strd/ — all eleven sets. The files
live in ``tests/data/nist/`` (provenance in its ``SOURCE.md``): ``NAME.csv`` holds
the data with our column names (``y`` and ``x``; Longley ``x1`` … ``x6``), and
``certified.json`` holds NIST's certified values, parsed from the ``NAME.dat``
files.

Coefficients and standard errors are in NIST's parameter order (B0, B1, …), which
is also the column order the formula produces: intercept first (when there is
one), then ``x``, ``I(x**2)``, … in rising power, or ``x1`` … ``x6``.

For the no-intercept sets (NoInt1, NoInt2) NIST's R-squared is uncentered. For
Wampler1 and Wampler2 (exact fits) the residual SD and standard errors are zero
and NIST gives no finite F statistic, so ``f_statistic`` is ``None``.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import Any, Final

NIST_DIR: Final[Path] = Path(__file__).resolve().parent / "data" / "nist"

# NIST's own listing order of its linear-regression sets, easiest first.
ALL_NIST: Final[tuple[str, ...]] = (
    "Norris",
    "Pontius",
    "NoInt1",
    "NoInt2",
    "Filip",
    "Longley",
    "Wampler1",
    "Wampler2",
    "Wampler3",
    "Wampler4",
    "Wampler5",
)


@dataclass(frozen=True, slots=True)
class NistCase:
    """One NIST StRD linear-regression set: where its data are and what NIST certifies."""

    name: str
    csv_path: Path
    formula: str
    intercept: bool
    coefficients: tuple[float, ...]
    std_errors: tuple[float, ...]
    residual_sd: float
    r_squared: float
    df_residual: int
    f_statistic: float | None


@cache
def _certified() -> dict[str, Any]:
    loaded = json.loads((NIST_DIR / "certified.json").read_text(encoding="utf-8"))
    if not isinstance(loaded, dict):
        raise ValueError("tests/data/nist/certified.json: expected a JSON object at the top")
    return loaded


def _float(entry: dict[str, Any], key: str, name: str) -> float:
    value = entry.get(key)
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError(f"NIST set {name}: {key!r} should be a number, found {value!r}")
    return float(value)


def _floats(entry: dict[str, Any], key: str, name: str) -> tuple[float, ...]:
    values = entry.get(key)
    if not isinstance(values, list) or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in values):
        raise ValueError(f"NIST set {name}: {key!r} should be a list of numbers, found {values!r}")
    return tuple(float(v) for v in values)


def _formula(entry: dict[str, Any], name: str) -> str:
    """Wilkinson formula in our CSV column names, terms in NIST's parameter order."""
    predictors = entry.get("predictors")
    degree = entry.get("degree")
    if isinstance(predictors, list) and all(isinstance(p, str) for p in predictors):
        terms = [str(p) for p in predictors]
    elif isinstance(degree, int) and not isinstance(degree, bool) and degree >= 1:
        terms = ["x", *(f"I(x**{k})" for k in range(2, degree + 1))]
    else:
        raise ValueError(f"NIST set {name}: needs 'predictors' or a positive 'degree'")
    rhs = " + ".join(terms)
    return f"y ~ {rhs}" if entry.get("intercept") is True else f"y ~ {rhs} - 1"


def load_nist(name: str) -> NistCase:
    """Return the NIST StRD linear-regression set ``name`` (one of ``ALL_NIST``)."""
    if name not in ALL_NIST:
        raise ValueError(f"unknown NIST StRD set {name!r}; known: {', '.join(ALL_NIST)}")
    entry = _certified().get(name)
    if not isinstance(entry, dict):
        raise ValueError(f"tests/data/nist/certified.json has no entry for {name}")
    intercept = entry.get("intercept")
    df_residual = entry.get("df_residual")
    if not isinstance(intercept, bool):
        raise ValueError(f"NIST set {name}: 'intercept' should be true or false")
    if not isinstance(df_residual, int) or isinstance(df_residual, bool):
        raise ValueError(f"NIST set {name}: 'df_residual' should be an integer")
    f_statistic = None if entry.get("f_statistic") is None else _float(entry, "f_statistic", name)
    coefficients = _floats(entry, "coefficients", name)
    std_errors = _floats(entry, "std_errors", name)
    if len(coefficients) != len(std_errors):
        raise ValueError(f"NIST set {name}: {len(coefficients)} coefficients but {len(std_errors)} SEs")
    return NistCase(
        name=name,
        csv_path=NIST_DIR / f"{name}.csv",
        formula=_formula(entry, name),
        intercept=intercept,
        coefficients=coefficients,
        std_errors=std_errors,
        residual_sd=_float(entry, "residual_sd", name),
        r_squared=_float(entry, "r_squared", name),
        df_residual=df_residual,
        f_statistic=f_statistic,
    )
