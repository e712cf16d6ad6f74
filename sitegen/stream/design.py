"""The design of one chunk of rows: the whole-file design's rules, applied a chunk at a time.

Only formulas whose every term is a product of numeric expressions (``y ~ x``, polynomials such as
``y ~ x + I(x**2)``, logs, products of columns) are read in chunks: their columns are evaluated directly in
extended precision (:class:`sitegen.formula.Plan`). Categorical or stateful terms (``C(...)``,
``center(...)``) need every row at once; such a model gets a clear message.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from sitegen.errors import FormulaError, WholeFileFormulaError
from sitegen.formula import (
    Plan,
    _dropped_rows,
    _evaluate_design,
    _ext_dtype,
    _factor_codes,
    _plan,
    check_formula,
    numeric_columns,
)
from sitegen.table import Table


@dataclass(frozen=True, slots=True)
class Model:
    """A formula worked out once for every chunk."""

    formula: str
    plan: Plan
    used: tuple[str, ...]  # data columns the model uses
    has_intercept: bool

    @property
    def terms(self) -> tuple[str, ...]:
        return self.plan.x_names


@dataclass(frozen=True, slots=True)
class ChunkDesign:
    """One chunk's design: the rows kept, in extended precision and rounded, and the rows left out."""

    X_ext: Any
    y_ext: Any
    X: NDArray[np.float64]
    y: NDArray[np.float64]
    rows: NDArray[np.int64]
    data: dict[str, NDArray[np.float64]]  # the model's columns over the rows kept
    dropped: list[tuple[int, str]]
    present: dict[str, bool]  # whether each model column has a value in some row of the chunk


def model_of(formula: str, columns: tuple[str, ...], name: str) -> Model:
    """The model of a chunked fit, or :class:`FormulaError` when its formula needs every row at once."""
    try:
        used = check_formula(formula, list(columns))
        _, _, intercept = _factor_codes(formula)
    except FormulaError as exc:
        raise FormulaError(f"{name}: {exc.message}", hint=exc.hint) from exc
    plan = _plan(formula, used)
    if plan is None:
        raise WholeFileFormulaError(
            f"{name}: the model {formula!r} has categorical or centred terms, which need every row at once, "
            "so this file cannot be read in chunks",
            hint="use numeric terms only (such as y ~ x + I(x**2)), or raise stream_above_megabytes above the "
            "file's size so that it is read whole",
        )
    return Model(formula, plan, used, intercept)


def chunk_design(model: Model, table: Table, name: str) -> ChunkDesign:
    """The design of one chunk; bad cells raise the whole-file reader's :class:`DataFileError`."""
    numeric = numeric_columns(table, list(model.used), name)
    present = {c: bool(np.any(~np.isnan(v))) for c, v in zip(numeric.names, numeric.columns, strict=True)}
    dropped = _dropped_rows(numeric, table, ())
    keep = np.ones(len(table), dtype=bool)
    for values in numeric.columns:
        keep &= np.isfinite(values)
    data = numeric.take(keep)
    evaluated = _evaluate_design(model.plan, data, _ext_dtype())
    if evaluated is None:
        raise FormulaError(f"{name}: the model {model.formula!r} cannot be evaluated", hint="check key 'model'")
    X_ext, y_ext = evaluated
    X, y = np.asarray(X_ext.astype(float)), np.asarray(y_ext.astype(float))
    rows = data.rows
    if len(rows):
        ok = np.isfinite(y) & np.isfinite(X).all(axis=1)
        for row in rows[~ok]:
            dropped.append((int(row), "the model's transformation is undefined here (e.g. log of a value ≤ 0)"))
        if not bool(ok.all()):
            X, y, rows, X_ext, y_ext = X[ok], y[ok], rows[ok], X_ext[ok], y_ext[ok]
            data = data.take(ok)
    columns = {c: np.asarray(v, dtype=np.float64) for c, v in zip(data.names, data.columns, strict=True)}
    return ChunkDesign(X_ext, y_ext, X, y, rows, columns, sorted(dropped), present)
