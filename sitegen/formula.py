"""Model formulas: check them safely, then turn a table into a design matrix.

Formulas use Wilkinson notation as patsy understands it (``y ~ x``,
``y ~ x - 1``, ``y ~ x + I(x**2)``, ``np.log(y) ~ x``). patsy evaluates each
factor as Python code, so every factor is parsed with :mod:`ast` first and only
column names, numbers, arithmetic and a short list of numpy functions are let
through: a sidecar on a shared drive must not be able to run code.
patsy's exceptions are translated here into :class:`~sitegen.errors.FormulaError`.
"""

from __future__ import annotations

import ast
import difflib
import keyword
import re
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from sitegen.errors import DataFileError, FormulaError

#: numpy functions a formula may call, as ``np.NAME`` or bare ``NAME``.
SAFE_FUNCTIONS = frozenset(
    {"log", "log10", "log2", "log1p", "exp", "expm1", "sqrt", "abs", "square", "reciprocal", "sin", "cos"}
)
#: patsy's own helpers that are safe to call.
PATSY_FUNCTIONS = frozenset({"I", "Q", "center", "standardize", "scale"})
_ALLOWED_NODES = (
    ast.Expression, ast.Name, ast.Load, ast.Constant, ast.BinOp, ast.UnaryOp, ast.Call, ast.Attribute,
    ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow, ast.USub, ast.UAdd, ast.Mod, ast.FloorDiv,
)  # fmt: skip


@dataclass(frozen=True, slots=True)
class Design:
    """A model's design matrix and response, with the CSV rows they came from."""

    X: NDArray[np.float64]
    y: NDArray[np.float64]
    terms: tuple[str, ...]
    response: str
    rows: NDArray[np.int64]  # 1-based CSV data rows used
    dropped: tuple[tuple[int, str], ...]  # (CSV row, reason) of rows left out
    has_intercept: bool
    variables: tuple[str, ...]  # data columns the model uses, in formula order
    data: pd.DataFrame  # used rows of `variables` (+ weights/group columns), indexed by CSV row
    design_info: Any  # patsy DesignInfo of the right-hand side, to build predictions
    X_ext: NDArray[np.longdouble]  # the same design evaluated in extended precision
    y_ext: NDArray[np.longdouble]


def quote_name(column: str) -> str:
    """How a column name must be written inside a formula."""
    if column.isidentifier() and not keyword.iskeyword(column) and column not in PATSY_FUNCTIONS:
        return column
    return "Q(" + repr(column) + ")"


def assumed_formula(frame: pd.DataFrame) -> str | None:
    """``second ~ first`` when the table has exactly two numeric columns, else None."""
    numeric = [c for c in frame.columns if pd.api.types.is_numeric_dtype(frame[c])]
    if len(frame.columns) == 2 and len(numeric) == 2:
        first, second = numeric
        return f"{quote_name(second)} ~ {quote_name(first)}"
    return None


class _FactorChecker(ast.NodeVisitor):
    def __init__(self, columns: set[str]) -> None:
        self.columns = columns
        self.used: list[str] = []
        self.missing: list[str] = []

    def generic_visit(self, node: ast.AST) -> None:
        if not isinstance(node, _ALLOWED_NODES):
            raise FormulaError(f"'{type(node).__name__}' is not allowed in a model formula")
        super().generic_visit(node)

    def visit_Constant(self, node: ast.Constant) -> None:
        if not isinstance(node.value, int | float) or isinstance(node.value, bool):
            raise FormulaError(f"only numbers may appear as constants in a model formula, not {node.value!r}")

    def visit_Call(self, node: ast.Call) -> None:
        func = node.func
        if node.keywords:
            raise FormulaError("keyword arguments are not allowed in a model formula")
        if isinstance(func, ast.Name) and func.id == "Q":
            arg = node.args[0] if len(node.args) == 1 else None
            if not (isinstance(arg, ast.Constant) and isinstance(arg.value, str)):
                raise FormulaError('Q() takes one quoted column name, e.g. Q("flow rate")')
            self._column(arg.value)
            return
        if isinstance(func, ast.Name) and (func.id in PATSY_FUNCTIONS or func.id in SAFE_FUNCTIONS):
            pass
        elif (
            isinstance(func, ast.Attribute)
            and isinstance(func.value, ast.Name)
            and func.value.id in ("np", "numpy")
            and func.attr in SAFE_FUNCTIONS
        ):
            pass
        else:
            allowed = ", ".join(sorted(f"np.{f}" for f in SAFE_FUNCTIONS))
            raise FormulaError(
                f"function '{ast.unparse(func)}' is not allowed in a model formula (use {allowed})"
            )
        for arg in node.args:
            self.visit(arg)

    def visit_Attribute(self, node: ast.Attribute) -> None:
        raise FormulaError(f"'{ast.unparse(node)}' is not allowed in a model formula")

    def visit_Name(self, node: ast.Name) -> None:
        self._column(node.id)

    def _column(self, name: str) -> None:
        if name in self.columns:
            if name not in self.used:
                self.used.append(name)
        elif name not in self.missing:
            self.missing.append(name)


def _factor_codes(formula: str) -> tuple[list[str], list[str], bool]:
    """(lhs factor codes, rhs factor codes, has intercept) without evaluating anything."""
    import patsy  # noqa: PLC0415 - patsy is only needed once a dataset is fitted

    if "~" not in formula:
        raise FormulaError(
            f"model {formula!r} has no '~'", hint='write it as "response ~ predictors", e.g. "y ~ x"'
        )
    try:
        desc = patsy.ModelDesc.from_formula(formula)
    except patsy.PatsyError as exc:
        raise FormulaError(f"model {formula!r} cannot be parsed: {_patsy_message(exc)}") from exc
    lhs = [f.code for t in desc.lhs_termlist for f in t.factors]
    rhs = [f.code for t in desc.rhs_termlist for f in t.factors]
    intercept = any(not t.factors for t in desc.rhs_termlist)
    if not lhs:
        raise FormulaError(f"model {formula!r} has no response on the left of '~'")
    return lhs, rhs, intercept


def _patsy_message(exc: Exception) -> str:
    text = str(exc).splitlines()
    return " ".join(line.strip() for line in text if line.strip())[:300]


def check_formula(formula: str, columns: list[str]) -> tuple[str, ...]:
    """Validate a formula against the table's columns; returns the columns it uses."""
    lhs, rhs, _ = _factor_codes(formula)
    checker = _FactorChecker(set(columns))
    for code in lhs + rhs:
        try:
            tree = ast.parse(code.strip(), mode="eval")
        except SyntaxError as exc:
            raise FormulaError(f"model {formula!r}: {code!r} is not a valid expression") from exc
        checker.visit(tree)
    if checker.missing:
        name = checker.missing[0]
        close = difflib.get_close_matches(name, columns, n=1)
        tip = f"did you mean {close[0]!r}? " if close else ""
        raise FormulaError(
            f"model {formula!r} names column {name!r}, which the data do not have",
            hint=f"{tip}available columns: {', '.join(columns)}",
        )
    return tuple(checker.used)


_NUMBERISH = re.compile(r"^\s*$")


def numeric_columns(frame: pd.DataFrame, columns: list[str], name: str) -> tuple[pd.DataFrame, list[str]]:
    """Coerce ``columns`` to float; non-numeric text is an error naming row and column."""
    out = {}
    notes: list[str] = []
    for col in columns:
        series = frame[col]
        if pd.api.types.is_bool_dtype(series):
            series = series.astype(float)
        if not pd.api.types.is_numeric_dtype(series):
            text = series.astype("string")
            converted = pd.to_numeric(text.str.strip(), errors="coerce")
            bad = converted.isna() & text.notna() & ~text.fillna("").str.match(_NUMBERISH)
            if bool(bad.any()):
                rows = [int(r) for r in bad[bad].index[:5]]
                sample = str(text.loc[rows[0]])[:30]
                more = f" and {int(bad.sum()) - 1} more" if int(bad.sum()) > 1 else ""
                raise DataFileError(
                    f"{name}: column {col!r} has text where a number is expected: {sample!r} on row {rows[0]}{more}",
                    hint="fix or delete those cells; an empty cell counts as a missing value",
                )
            series = converted
        out[col] = series.astype(float)
    return pd.DataFrame(out, index=frame.index), notes


def build_design(formula: str, frame: pd.DataFrame, name: str, extra: tuple[str, ...] = ()) -> Design:
    """Turn the table into a design matrix, leaving out rows with missing or non-finite values."""
    import patsy  # noqa: PLC0415

    columns = [str(c) for c in frame.columns]
    used = check_formula(formula, columns)
    _, _, intercept = _factor_codes(formula)
    numeric, _ = numeric_columns(frame, list(used), name)
    for col in extra:
        if col not in columns:
            raise FormulaError(
                f"column {col!r} is not in the data", hint=f"available columns: {', '.join(columns)}"
            )
    dropped: list[tuple[int, str]] = []
    finite = np.isfinite(numeric.to_numpy(dtype=float)).all(axis=1)
    extra_ok = frame[list(extra)].notna().all(axis=1).to_numpy() if extra else np.ones(len(frame), bool)
    for row in numeric.index[~finite]:
        vals = numeric.loc[row]
        why = "missing value" if bool(vals.isna().any()) else "infinite value"
        dropped.append((int(row), why))
    for row in numeric.index[finite & ~extra_ok]:
        dropped.append((int(row), "missing value"))
    keep = finite & extra_ok
    data = numeric[keep]
    for col in extra:
        if col not in data.columns:
            data = data.assign(**{col: frame.loc[keep, col]})
    env = patsy.EvalEnvironment([{"np": np, "numpy": np} | {f: getattr(np, f) for f in SAFE_FUNCTIONS}])
    try:
        with np.errstate(all="ignore"):
            y_df, x_df = patsy.dmatrices(
                formula, data, eval_env=env, return_type="dataframe", NA_action="raise"
            )
    except patsy.PatsyError as exc:
        raise FormulaError(f"model {formula!r} cannot be applied to the data: {_patsy_message(exc)}") from exc
    except (ValueError, TypeError, ArithmeticError) as exc:
        raise FormulaError(f"model {formula!r} cannot be evaluated: {exc}") from exc
    if y_df.shape[1] != 1:
        raise FormulaError(
            f"model {formula!r} must have exactly one numeric response column on the left of '~'"
        )
    y = y_df.to_numpy(dtype=float)[:, 0]
    X = x_df.to_numpy(dtype=float)
    ok = np.isfinite(y) & np.isfinite(X).all(axis=1)
    rows = np.asarray(x_df.index, dtype=np.int64)
    if not bool(ok.all()):
        for row in rows[~ok]:
            dropped.append(
                (int(row), "the model's transformation is undefined here (e.g. log of a value ≤ 0)")
            )
        X, y, rows = X[ok], y[ok], rows[ok]
        data = data.loc[rows]
    X_ext, y_ext = _extended(x_df.design_info, y_df.design_info, data, X, y)
    return Design(
        X_ext=X_ext,
        y_ext=y_ext,
        X=np.ascontiguousarray(X),
        y=y,
        terms=tuple(str(c) for c in x_df.columns),
        response=str(y_df.columns[0]),
        rows=rows,
        dropped=tuple(sorted(dropped)),
        has_intercept=intercept,
        variables=used,
        data=data,
        design_info=x_df.design_info,
    )


def design_for(design: Design, new: pd.DataFrame) -> NDArray[np.float64]:
    """Design matrix rows for new predictor values (for predictions)."""
    import patsy  # noqa: PLC0415

    try:
        with np.errstate(all="ignore"):
            (mat,) = patsy.build_design_matrices([design.design_info], new, NA_action="raise")
    except patsy.PatsyError as exc:
        raise FormulaError(f"prediction values do not fit the model: {_patsy_message(exc)}") from exc
    return np.asarray(mat, dtype=float)


_STATEFUL = ("center", "standardize", "scale")


def _evaluate(code: str, namespace: dict[str, Any]) -> NDArray[np.longdouble]:
    # The code passed _FactorChecker: only column names, numbers, arithmetic and
    # whitelisted numpy functions can appear, and builtins are withheld.
    value = eval(compile(code, "<formula>", "eval"), {"__builtins__": {}}, namespace)  # noqa: S307
    return np.broadcast_to(np.asarray(value, dtype=np.longdouble), (len(namespace["__rows__"]),))


def _extended(
    x_info: Any, y_info: Any, data: pd.DataFrame, X: NDArray[np.float64], y: NDArray[np.float64]
) -> tuple[NDArray[np.longdouble], NDArray[np.longdouble]]:
    """Re-evaluate the design in extended precision so powers such as x**10 keep their digits.

    Falls back to the float64 design when a term is categorical or uses a
    stateful transform, or when the two evaluations disagree beyond rounding.
    """
    fallback = X.astype(np.longdouble), y.astype(np.longdouble)
    codes = [f.code for t in x_info.terms for f in t.factors] + [
        f.code for t in y_info.terms for f in t.factors
    ]
    if any(s in code for code in codes for s in _STATEFUL) or X.shape[1] != len(x_info.terms):
        return fallback
    namespace: dict[str, Any] = {
        c: data[c].to_numpy(dtype=np.longdouble)
        for c in data.columns
        if pd.api.types.is_numeric_dtype(data[c])
    }
    namespace |= {
        "np": np,
        "numpy": np,
        "I": lambda v: v,
        "Q": lambda name: namespace[name],
        "__rows__": data.index,
    }
    namespace |= {f: getattr(np, f) for f in SAFE_FUNCTIONS}
    try:
        with np.errstate(all="ignore"):
            cols = []
            for term in x_info.terms:
                col = np.ones(len(data), dtype=np.longdouble)
                for factor in term.factors:
                    col = col * _evaluate(factor.code, namespace)
                cols.append(col)
            (yterm,) = y_info.terms
            (yfactor,) = yterm.factors
            y_ext = _evaluate(yfactor.code, namespace)
    except (TypeError, ValueError, KeyError, NameError, ArithmeticError):
        return fallback
    X_ext = np.column_stack(cols) if cols else np.empty((len(data), 0), dtype=np.longdouble)
    with np.errstate(all="ignore"):
        same = np.allclose(X_ext.astype(float), X, rtol=1e-12, atol=0) and np.allclose(
            y_ext.astype(float), y, rtol=1e-12, atol=0
        )
    return (X_ext, y_ext) if same else fallback
