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
import functools
import json
import keyword
import re
from collections.abc import Mapping
from dataclasses import dataclass
from types import CodeType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from sitegen import __version__
from sitegen.cache import read_record, write_record
from sitegen.errors import DataFileError, FitError, FormulaError
from sitegen.stats import ext
from sitegen.table import Table, as_table, from_columns, to_float

#: numpy functions a formula may call, as ``np.NAME`` or bare ``NAME``.
SAFE_FUNCTIONS = frozenset(
    {
        "log",
        "log10",
        "log2",
        "log1p",
        "exp",
        "expm1",
        "sqrt",
        "abs",
        "square",
        "reciprocal",
        "sin",
        "cos",
        "power",
        "cbrt",
    }
)
#: patsy's own helpers that are safe to call.
PATSY_FUNCTIONS = frozenset({"I", "Q", "center", "standardize", "scale"})
#: Longest model formula accepted (a guard against pathological sidecars).
MAX_FORMULA_CHARS = 10_000
#: Largest power a formula may raise to (``x**MAX_EXPONENT``); Python would compute a power of a power of
#: whole numbers (``10**10**10``) exactly, for hours and gigabytes, before numpy ever saw it.
MAX_EXPONENT = 1000
#: Largest whole number written in a formula (beyond it numpy cannot hold it; write 1e20 instead).
MAX_INTEGER = 10**18
#: Most terms a formula may expand to (``(a+b+c)**2`` has 6); ``(a+…+z)**20`` would be millions.
MAX_TERMS = 1000
#: Highest order of interaction ``(a+b)**N`` may ask for (patsy loops N times, whatever N is).
MAX_INTERACTION_ORDER = 10
_ALLOWED_NODES = (
    ast.Expression,
    ast.Name,
    ast.Load,
    ast.Constant,
    ast.BinOp,
    ast.UnaryOp,
    ast.Call,
    ast.Attribute,
    ast.Add,
    ast.Sub,
    ast.Mult,
    ast.Div,
    ast.Pow,
    ast.USub,
    ast.UAdd,
    ast.Mod,
    ast.FloorDiv,
)


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
    data: Table  # used rows of `variables` (+ weights/group columns), with their CSV rows
    design_info: Any  # a Plan (simple designs) or patsy's DesignInfo of the right-hand side, for predictions
    X_ext: Any  # the same design evaluated in extended precision (long double or ext.DD)
    y_ext: Any
    simple: bool = False  # every term is a product of numeric expressions: evaluated without patsy


#: Names a formula uses for functions and modules: a column named so is reached only as ``Q("name")``.
CALLABLE_NAMES = PATSY_FUNCTIONS | SAFE_FUNCTIONS | {"np", "numpy"}


def quote_name(column: str) -> str:
    """How a column name must be written inside a formula."""
    if column.isidentifier() and not keyword.iskeyword(column) and column not in CALLABLE_NAMES:
        return column
    return "Q(" + repr(column) + ")"


def plain_column(term: str, variables: tuple[str, ...]) -> str | None:
    """The data column a term or response names as it is (``x``, ``Q('x')``, ``Q("lab result")``), else None.

    The formula library keeps a quoted name as it was written, in either kind of quotes, so both are read.
    """
    if term in variables:
        return term
    quoted = re.fullmatch(r"""Q\(\s*((['"]).*\2)\s*\)""", term, flags=re.DOTALL)
    if quoted is None:
        return None
    try:
        name = ast.literal_eval(quoted.group(1))
    except (ValueError, SyntaxError):
        return None
    return name if isinstance(name, str) and name in variables else None


def _mostly_numeric(values: NDArray[Any]) -> bool:
    """Numeric, or text of which at least half the filled cells are numbers (so a stray word is reported)."""
    if values.dtype.kind in "fiub":
        return True
    numbers, bad = to_float(values)
    good = int(np.isfinite(numbers).sum() + np.isinf(numbers).sum())
    filled = good + int(bad.sum())
    return filled == 0 or good * 2 >= filled


def assumed_formula(table: Table) -> str | None:
    """``second ~ first`` when the table has exactly two numeric columns, else None.

    A column that is numeric apart from a few stray cells still counts, so that
    fitting it reports the offending cells by row instead of "no model".
    """
    if len(table.names) == 2 and all(_mostly_numeric(c) for c in table.columns):
        first, second = table.names
        return f"{quote_name(second)} ~ {quote_name(first)}"
    return None


class _FactorChecker(ast.NodeVisitor):
    def __init__(self, columns: set[str]) -> None:
        self.columns = columns
        self.used: list[str] = []
        self.missing: list[str] = []

    def generic_visit(self, node: ast.AST) -> None:
        if not isinstance(node, _ALLOWED_NODES):
            raise FormulaError(
                f"'{type(node).__name__}' is not allowed in a model formula",
                hint="key 'model' may hold column names, numbers, arithmetic and a few numpy functions",
            )
        super().generic_visit(node)

    def visit_Constant(self, node: ast.Constant) -> None:
        if not isinstance(node.value, int | float) or isinstance(node.value, bool):
            raise FormulaError(
                f"only numbers may appear as constants in a model formula, not {repr(node.value)[:60]}",
                hint="quote column names with Q(\"name\") in key 'model'",
            )
        if isinstance(node.value, int) and abs(node.value) > MAX_INTEGER:
            raise FormulaError(
                f"the whole number {_digits(node.value)} in the model is too large to compute with",
                hint=f"key 'model' may hold whole numbers up to 1e18; write larger ones as decimals, e.g. "
                f"{float(node.value):.3g}",
            )

    def visit_BinOp(self, node: ast.BinOp) -> None:
        if isinstance(node.op, ast.Pow):
            _check_exponent(node.right)
        _constant_value(node)  # a part made of numbers only must come to a finite number
        self.generic_visit(node)

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
        plain = isinstance(func, ast.Name) and (func.id in PATSY_FUNCTIONS or func.id in SAFE_FUNCTIONS)
        dotted = (
            isinstance(func, ast.Attribute)
            and isinstance(func.value, ast.Name)
            and func.value.id in ("np", "numpy")
            and func.attr in SAFE_FUNCTIONS
        )
        if not (plain or dotted):
            allowed = ", ".join(sorted(f"np.{f}" for f in SAFE_FUNCTIONS))
            raise FormulaError(
                f"function '{ast.unparse(func)[:60]}' is not allowed in a model formula",
                hint=f"key 'model' may call only {allowed} and I(), Q(), center(), standardize(), scale()",
            )
        name = func.id if isinstance(func, ast.Name) else func.attr if isinstance(func, ast.Attribute) else ""
        if name == "power" and len(node.args) == 2:
            _check_exponent(node.args[1])
        for arg in node.args:
            self.visit(arg)

    def visit_Attribute(self, node: ast.Attribute) -> None:
        raise FormulaError(
            f"'{ast.unparse(node)[:60]}' is not allowed in a model formula",
            hint="key 'model' may call np.<function> for a few numpy functions only",
        )

    def visit_Name(self, node: ast.Name) -> None:
        self._column(node.id)

    def _column(self, name: str) -> None:
        if name in self.columns:
            if name not in self.used:
                self.used.append(name)
        elif name not in self.missing:
            self.missing.append(name)


def _digits(value: int) -> str:
    """A whole number for a message: itself when short, else its first digits and its length."""
    text = str(abs(value)) if value.bit_length() < 10_000 else ""
    if text and len(text) <= 24:
        return str(value)
    return f"of {len(text):,} digits" if text else f"of about {int(value.bit_length() * 0.30103):,} digits"


def _constant_value(node: ast.AST) -> float | None:
    """The value of a part of a formula made of numbers only, worked out in floating point (so never a
    huge whole number); None when the part names a column or calls a function."""
    if isinstance(node, ast.Constant) and isinstance(node.value, int | float) and not isinstance(node.value, bool):
        return float(node.value) if abs(node.value) <= MAX_INTEGER else float("inf")
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub | ast.UAdd):
        inner = _constant_value(node.operand)
        return None if inner is None else (-inner if isinstance(node.op, ast.USub) else inner)
    if not isinstance(node, ast.BinOp):
        return None
    left, right = _constant_value(node.left), _constant_value(node.right)
    if left is None or right is None:
        return None
    try:
        if isinstance(node.op, ast.Add):
            value = left + right
        elif isinstance(node.op, ast.Sub):
            value = left - right
        elif isinstance(node.op, ast.Mult):
            value = left * right
        elif isinstance(node.op, ast.Div):
            value = left / right
        elif isinstance(node.op, ast.FloorDiv):
            value = left // right
        elif isinstance(node.op, ast.Mod):
            value = left % right
        elif isinstance(node.op, ast.Pow):
            value = abs(left) ** right if abs(right) <= MAX_EXPONENT else float("inf")
        else:
            return None
    except ZeroDivisionError:
        raise FormulaError(f"'{ast.unparse(node)[:60]}' in the model divides by zero", hint="fix key 'model'") from None
    except OverflowError:
        value = float("inf")
    if not np.isfinite(value):
        raise FormulaError(
            f"'{ast.unparse(node)[:60]}' in the model is a number too large to compute with",
            hint="key 'model' may hold numbers up to about 1e308 and powers up to "
            f"{MAX_EXPONENT}; a power of a power of a number is refused",
        )
    return value


def _check_exponent(node: ast.AST) -> None:
    """Refuse a power whose exponent is a number beyond :data:`MAX_EXPONENT`."""
    exponent = _constant_value(node)
    if exponent is not None and abs(exponent) > MAX_EXPONENT:
        raise FormulaError(
            f"the power '{ast.unparse(node)[:60]}' in the model is larger than {MAX_EXPONENT}",
            hint=f"key 'model' may raise to powers up to {MAX_EXPONENT}; a power of a power of a number is refused",
        )


def _check_expansion(formula: str) -> None:
    """Refuse, before patsy expands it, a formula whose terms would run into the millions (``(a+…+z)**20``)
    or whose interaction order patsy would loop over for ever (``(a+b)**1000000000``)."""
    from patsy.parse_formula import parse_formula  # noqa: PLC0415

    def bound(node: Any) -> int:  # an upper bound on the terms a formula node expands to
        args = [bound(a) for a in node.args if node.type != "**" or a is node.args[0]]
        if node.type == "**":
            order_text = node.args[1].origin.code[node.args[1].origin.start : node.args[1].origin.end]
            try:
                order = int(order_text)
            except ValueError:
                return args[0]  # patsy reports a power that is not a whole number itself
            if order > MAX_INTERACTION_ORDER:
                raise FormulaError(
                    f"the model asks for interactions of order {_digits(order)}, more than {MAX_INTERACTION_ORDER}",
                    hint=f"key 'model' may raise a sum of terms to powers up to {MAX_INTERACTION_ORDER}; "
                    "use I(x**2) for the square of a column",
                )
            return int(min(2 ** min(args[0], 64), (args[0] + 1) ** order))
        if node.type == ":":
            return args[0] * args[1]
        if node.type in ("*", "/"):
            return args[0] + args[1] + args[0] * args[1]
        if node.type in ("+", "~"):
            return sum(args)
        if node.type == "-":
            return args[0] if len(args) == 2 else 1
        return max(1, sum(args))

    try:
        tree = parse_formula(formula)
    except (RecursionError, MemoryError) as exc:
        raise _too_deep(formula) from exc
    except Exception:
        return
    try:
        terms = bound(tree)
    except RecursionError as exc:
        raise _too_deep(formula) from exc
    if terms > MAX_TERMS:
        raise FormulaError(
            f"the model {_show(formula)} expands to {'over ' if terms >= 2**64 else ''}{terms:,} terms, "
            f"more than the {MAX_TERMS:,} allowed",
            hint="key 'model' must name fewer terms and interactions",
        )


def _factor_codes(formula: str) -> tuple[list[str], list[str], bool]:
    """(lhs factor codes, rhs factor codes, has intercept) without evaluating anything."""
    if len(formula) > MAX_FORMULA_CHARS:
        raise FormulaError(
            f"the model is {len(formula):,} characters long, more than the {MAX_FORMULA_CHARS:,} allowed",
            hint="write a shorter model formula (key 'model' in the sidecar or in site.toml [defaults])",
        )
    if "~" not in formula:
        raise FormulaError(
            f"the model {_show(formula)} has no '~'",
            hint='write it as "response ~ predictors", e.g. "y ~ x" (key \'model\')',
        )
    known = _remembered("parse", formula)
    if isinstance(known, dict):
        try:
            lhs, rhs = [str(c) for c in known["lhs"]], [str(c) for c in known["rhs"]]
            if _same_names(formula, lhs + rhs) and known.get("bounded") is True:  # checked by _check_expansion
                return lhs, rhs, bool(known["intercept"])
        except (KeyError, TypeError):
            pass
    import patsy  # noqa: PLC0415 - only for a formula not parsed before

    _check_expansion(formula)
    try:
        desc = patsy.ModelDesc.from_formula(formula)
    except patsy.PatsyError as exc:
        raise FormulaError(
            f"the model {_show(formula)} cannot be parsed: {_patsy_message(exc)}",
            hint='check key \'model\': write it as "response ~ predictors", e.g. "y ~ x + I(x**2)"',
        ) from exc
    except (RecursionError, MemoryError) as exc:
        raise _too_deep(formula) from exc
    lhs = [f.code for t in desc.lhs_termlist for f in t.factors]
    rhs = [f.code for t in desc.rhs_termlist for f in t.factors]
    intercept = any(not t.factors for t in desc.rhs_termlist)
    if not lhs:
        raise FormulaError(
            f"the model {_show(formula)} has no response on the left of '~'",
            hint="name the response column first, e.g. \"y ~ x\" (key 'model')",
        )
    _remember("parse", formula, {"lhs": lhs, "rhs": rhs, "intercept": intercept, "bounded": True})
    return lhs, rhs, intercept


_IDENTIFIER = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


def _same_names(formula: str, codes: list[str]) -> bool:
    """Every name in the formula text appears in the remembered factor codes.

    patsy's codes are pieces of the formula, so a genuine record always passes; a record edited to pair
    a formula with harmless codes does not, and the formula is parsed (and checked) afresh.
    """
    return set(_IDENTIFIER.findall(formula)) <= set(_IDENTIFIER.findall(" ".join(codes)))


# --- what patsy worked out about a formula, kept between builds ------------------------------------
#
# patsy (and pandas, which it imports) cost about half a second to import. What it decides about a
# formula -- its factors, its terms and their column names -- depends only on the formula text, the
# columns it uses and patsy's version, so it is kept in the user's cache and a rebuild that fits a
# changed dataset with a known formula does not import patsy at all.

_RECORD = "formulas.json"
_MEMORY: dict[str, Any] = {}
_LOADED = False


def _key(kind: str, formula: str, used: tuple[str, ...] = ()) -> str:
    from sitegen.versions import library_versions  # noqa: PLC0415

    patsy_version = library_versions(("patsy",))["patsy"]
    return json.dumps([kind, __version__, patsy_version, formula, list(used)])


def _remembered(kind: str, formula: str, used: tuple[str, ...] = ()) -> Any:
    global _LOADED  # noqa: PLW0603 - one read of the record per process
    if not _LOADED:
        stored = read_record(_RECORD)
        if isinstance(stored, dict):
            _MEMORY.update(stored)
        _LOADED = True
    return _MEMORY.get(_key(kind, formula, used))


def _remember(kind: str, formula: str, value: Any, used: tuple[str, ...] = ()) -> None:
    key = _key(kind, formula, used)
    if _MEMORY.get(key) == value:
        return
    if len(_MEMORY) > 2000:  # bounded: the oldest entries go first
        for old in list(_MEMORY)[:1000]:
            del _MEMORY[old]
    _MEMORY[key] = value
    write_record(_RECORD, _MEMORY)


def _too_deep(formula: str) -> FormulaError:
    return FormulaError(f"the model {_show(formula)} is nested too deeply to be read", hint="simplify key 'model'")


def _show(formula: str) -> str:
    return repr(formula) if len(formula) <= 80 else repr(formula[:77] + "...")


def _patsy_message(exc: Exception) -> str:
    """patsy's first line and where in the formula it stopped (its caret drawing needs several lines)."""
    first = str(exc).splitlines()[0].strip() if str(exc).strip() else "not understood"
    origin = getattr(exc, "origin", None)
    start = getattr(origin, "start", None)
    code = getattr(origin, "code", None)
    if isinstance(start, int) and isinstance(code, str):
        near = code[start : start + 20]
        where = f"at character {start + 1}" + (f" ({near!r})" if near.strip() else " (the end)")
        return f"{first} {where}"[:300]
    return first[:300]


def check_formula(formula: str, columns: list[str]) -> tuple[str, ...]:
    """Validate a formula against the table's columns; returns the columns it uses."""
    lhs, rhs, _ = _factor_codes(formula)
    checker = _FactorChecker(set(columns))
    for code in lhs + rhs:
        try:
            tree = ast.parse(code.strip(), mode="eval")
            checker.visit(tree)
        except SyntaxError as exc:
            raise FormulaError(
                f"the model {_show(formula)}: {code!r} is not a valid expression",
                hint="check the brackets and operators in key 'model'",
            ) from exc
        except (RecursionError, MemoryError) as exc:
            raise _too_deep(formula) from exc
    if "Intercept" in checker.used:
        raise FormulaError(
            "a column named 'Intercept' cannot be used in a model: the name is taken by the intercept term",
            hint="rename the column in the CSV header",
        )
    if checker.missing:
        name = checker.missing[0]
        close = difflib.get_close_matches(name, columns, n=1)
        tip = f"did you mean {close[0]!r}? " if close else ""
        raise FormulaError(
            f"the model {_show(formula)} names column {name!r}, which the data do not have",
            hint=f"{tip}fix key 'model'; available columns: {', '.join(map(repr, columns))}",
        )
    return tuple(checker.used)


_DECIMAL_COMMA = re.compile(r"^[-+]?\d{1,3}(\.\d{3})*,\d+$|^[-+]?\d+,\d+$")
_NUMBERISH = re.compile(r"^\s*$")


def numeric_columns(table: Table, columns: list[str], name: str) -> Table:
    """Coerce ``columns`` to float; non-numeric text is an error naming row and column."""
    out: dict[str, NDArray[np.float64]] = {}
    for col in columns:
        values = table[col]
        numbers, bad = to_float(values)
        if bool(bad.any()):
            where_bad = np.flatnonzero(bad)
            rows = [int(table.rows[i]) for i in where_bad[:5]]
            sample = str(values[where_bad[0]])[:30]
            count = int(bad.sum())
            where = f"row {rows[0]}" if count == 1 else "rows " + ", ".join(map(str, rows))
            more = f" and {count - len(rows)} more" if count > len(rows) else ""
            hint = (
                "fix or delete those cells (an empty cell counts as a missing value), "
                "or leave the column out of the model"
            )
            if _DECIMAL_COMMA.match(sample.strip()):
                hint = (
                    f"{sample.strip()!r} looks like a number written with a decimal comma: "
                    'set decimal = "," in the sidecar (and delimiter = ";" if columns are separated by '
                    "semicolons); otherwise " + hint
                )
            raise DataFileError(
                f"{name}: column {col!r} has text where a number is expected "
                f"({sample!r} on row {rows[0]}); {count} cell(s) in all, on {where}{more}",
                hint=hint,
            )
        out[col] = numbers
    return from_columns(out, table.rows)


def _missing(values: NDArray[Any]) -> NDArray[np.bool_]:
    """Cells with no value: NaN in a float column, None in a text column."""
    if values.dtype.kind == "f":
        return np.asarray(np.isnan(values), dtype=bool)
    if values.dtype.kind == "O":
        return np.array([v is None for v in values.tolist()], dtype=bool)
    return np.zeros(values.shape, dtype=bool)


def build_design(formula: str, frame: Table | Any, name: str, extra: tuple[str, ...] = ()) -> Design:
    """Turn the table into a design matrix, leaving out rows with missing or non-finite values.

    ``frame`` is a :class:`~sitegen.table.Table` (a pandas DataFrame indexed by CSV row is accepted too).
    """
    table = as_table(frame)
    columns = list(table.names)
    try:
        used = check_formula(formula, columns)
        _, _, intercept = _factor_codes(formula)
    except FormulaError as exc:
        raise FormulaError(f"{name}: {exc.message}", hint=exc.hint) from exc
    numeric = numeric_columns(table, list(used), name)
    for col in extra:
        if col not in columns:
            raise FormulaError(
                f"{name}: column {col!r} (named by key 'weights' or 'group') is not in the data",
                hint=f"available columns: {', '.join(map(repr, columns))}",
            )
    for col, values in zip(numeric.names, numeric.columns, strict=True):
        if bool(np.isnan(values).all()):
            raise DataFileError(
                f"{name}: column {col!r}, which the model uses, is empty in every row",
                hint="fill the column in, or name another column in key 'model'",
            )
    dropped = _dropped_rows(numeric, table, extra)
    finite = np.ones(len(table), dtype=bool)
    for values in numeric.columns:
        finite &= np.isfinite(values)
    keep = finite
    for col in extra:
        keep = keep & ~_missing(table[col])
    if not bool(keep.any()):
        raise FitError(
            f"{name}: no row has a finite value in every column the model uses "
            f"({', '.join(map(repr, (*used, *extra)))})",
            hint="fill in the missing values, or check that key 'model' names the right columns",
        )
    data = numeric.take(keep)
    for col in extra:
        if col not in data:
            data = data.assign(col, table[col][keep])
    plan = _plan(formula, used)
    if plan is not None:
        evaluated = _evaluate_design(plan, data, _ext_dtype())
        if evaluated is not None:
            return _finish_simple(
                plan,
                evaluated=evaluated,
                data=data,
                dropped=dropped,
                intercept=intercept,
                used=used,
                name=name,
                formula=formula,
            )
    return _patsy_design(formula, data, dropped=dropped, intercept=intercept, used=used, name=name)


def _patsy_design(
    formula: str,
    data: Table,
    *,
    dropped: list[tuple[int, str]],
    intercept: bool,
    used: tuple[str, ...],
    name: str,
) -> Design:
    """The general path: patsy builds the design (categorical or stateful terms)."""
    import patsy  # noqa: PLC0415

    env = _environment()
    try:
        with np.errstate(all="ignore"):
            y_dm, x_dm = patsy.dmatrices(
                formula,
                _for_patsy(data.as_dict()),
                eval_env=env,
                return_type="matrix",
                # The data hold finite numbers only; a NaN can only come from a transformation
                # (log of a negative value …) and is left in, to be reported row by row below.
                NA_action=patsy.NAAction(NA_types=[]),
            )
    except patsy.PatsyError as exc:
        raise FormulaError(
            f"{name}: the model {_show(formula)} cannot be applied to the data: {_patsy_message(exc)}",
            hint="check key 'model'",
        ) from exc
    except (ValueError, TypeError, ArithmeticError) as exc:  # a MemoryError is the memory bound's (executor)
        raise FormulaError(
            f"{name}: the model {_show(formula)} cannot be evaluated: {str(exc)[:200]}",
            hint="check key 'model'",
        ) from exc
    if y_dm.shape[1] != 1:
        raise FormulaError(
            f"{name}: the model {_show(formula)} must have exactly one numeric response on the left of '~'",
            hint="check key 'model'",
        )
    y = np.asarray(y_dm, dtype=float)[:, 0]
    X = np.asarray(x_dm, dtype=float)
    rows = data.rows
    ok = _defined_rows(X, y, rows, dropped=dropped, name=name, formula=formula)
    if not bool(ok.all()):
        X, y, rows = X[ok], y[ok], rows[ok]
        data = data.take(ok)
    names = tuple(str(c) for c in x_dm.design_info.column_names)
    _check_constant_terms(X, names, intercept, name)
    X_ext, y_ext = _extended(x_dm.design_info, y_dm.design_info, data, X, y)
    return Design(
        X_ext=X_ext,
        y_ext=y_ext,
        X=np.ascontiguousarray(X),
        y=y,
        terms=names,
        response=str(y_dm.design_info.column_names[0]),
        rows=rows,
        dropped=tuple(sorted(dropped)),
        has_intercept=intercept,
        variables=used,
        data=data,
        design_info=x_dm.design_info,
    )


def _defined_rows(
    X: NDArray[Any],
    y: NDArray[Any],
    rows: NDArray[np.int64],
    *,
    dropped: list[tuple[int, str]],
    name: str,
    formula: str,
) -> NDArray[np.bool_]:
    """Rows where the model's transformations are defined; the others are recorded in ``dropped``."""
    ok: NDArray[np.bool_] = np.isfinite(y) & np.isfinite(X).all(axis=1)
    if not bool(ok.any()):
        raise FitError(
            f"{name}: the model {_show(formula)} is undefined in every row (e.g. the log of values ≤ 0)",
            hint="check the transformations in key 'model' against the data",
        )
    for row in rows[~ok]:
        dropped.append((int(row), "the model's transformation is undefined here (e.g. log of a value ≤ 0)"))
    return ok


def _dropped_rows(numeric: Table, table: Table, extra: tuple[str, ...]) -> list[tuple[int, str]]:
    """(CSV row, reason naming the column) of each row with a missing or infinite value the model needs."""
    n = len(table)
    values = np.column_stack(numeric.columns) if numeric.columns else np.empty((n, 0))
    missing = np.isnan(values)
    infinite = np.isinf(values)
    extra_missing = np.column_stack([_missing(table[c]) for c in extra]) if extra else np.zeros((n, 0), dtype=bool)
    out: list[tuple[int, str]] = []
    names = list(numeric.names)
    csv_rows = [int(r) for r in table.rows]
    bad_rows = np.flatnonzero(missing.any(axis=1) | infinite.any(axis=1) | extra_missing.any(axis=1))
    for i in (int(k) for k in bad_rows):
        j_miss = np.flatnonzero(missing[i])
        j_inf = np.flatnonzero(infinite[i])
        if j_miss.size:
            cols = " and ".join(repr(names[int(j)]) for j in j_miss[:3]) + (" …" if j_miss.size > 3 else "")
            out.append((csv_rows[i], f"missing value in {cols}"))
        elif j_inf.size:
            out.append((csv_rows[i], f"infinite value in {names[int(j_inf[0])]!r}"))
        else:
            col = extra[int(np.flatnonzero(extra_missing[i])[0])]
            out.append((csv_rows[i], f"missing value in {col!r}"))
    return out


def _check_constant_terms(X: NDArray[np.float64], names: Any, intercept: bool, name: str) -> None:
    """A predictor that never varies cannot be told apart from the intercept."""
    if not intercept or X.shape[0] < 2:
        return
    for j, term in enumerate(str(c) for c in names):
        if term != "Intercept" and float(np.ptp(X[:, j])) == 0.0:
            raise FitError(
                f"{name}: term {term!r} has the same value ({X[0, j]:.6g}) in all {X.shape[0]} rows used, "
                "so its effect cannot be told apart from the intercept",
                hint=f"the data need at least two different values of {term}; check that the model names "
                "the right column",
            )


def design_for(design: Design, new: Mapping[str, ArrayLike] | Any) -> NDArray[np.float64]:
    """Design matrix rows for new predictor values (for predictions); ``new`` maps column names to values."""
    columns = {str(k): np.asarray(new[k]) for k in new.keys()}  # noqa: SIM118 - a DataFrame is accepted too
    if design.simple:
        try:
            floats = from_columns({k: v.astype(float) for k, v in columns.items()})
        except (TypeError, ValueError) as exc:
            raise FormulaError("prediction values do not fit the model: the model's columns need numbers") from exc
        cols = _evaluate_terms(design.design_info.x_terms, floats, np.float64)
        if cols is not None:
            return np.asarray(cols, dtype=np.float64)
        missing = [v for v in design.variables if v not in columns]
        raise FormulaError(
            "prediction values do not fit the model" + (f": no value for {missing[-1]!r}" if missing else "")
        )
    import patsy  # noqa: PLC0415

    try:
        with np.errstate(all="ignore"):
            (mat,) = patsy.build_design_matrices([design.design_info], _for_patsy(columns), NA_action="raise")
    except patsy.PatsyError as exc:
        raise FormulaError(f"prediction values do not fit the model: {_patsy_message(exc)}") from exc
    return np.asarray(mat, dtype=float)


_STATEFUL = ("center", "standardize", "scale")


def _ext_dtype() -> Any:
    """The extended type designs are evaluated in: long double, or double-double where long
    double is a plain double (or when forced; see :mod:`sitegen.stats.ext`)."""
    return ext.DOUBLE_DOUBLE if ext.current() == ext.DOUBLE_DOUBLE else np.longdouble


def _is_dd(dtype: Any) -> bool:
    return isinstance(dtype, str) and dtype == ext.DOUBLE_DOUBLE


@functools.lru_cache(maxsize=256)
def _compiled(code: str) -> CodeType:
    """A factor's code, compiled once per process (the same formula serves dataset after dataset)."""
    return compile(code, "<formula>", "eval")


def _evaluate(code: str, namespace: dict[str, Any]) -> Any:
    # The code passed _FactorChecker: only column names, numbers, arithmetic and
    # whitelisted numpy functions can appear, and builtins are withheld.
    value = eval(_compiled(code), {"__builtins__": {}}, namespace)  # noqa: S307
    shape = (len(namespace["__rows__"]),)
    if isinstance(value, ext.DD):
        return ext.broadcast_to(value, shape)
    if namespace.get("__dd__"):
        return ext.DD(np.broadcast_to(np.asarray(value, dtype=np.float64), shape))
    return np.broadcast_to(np.asarray(value, dtype=np.longdouble), shape)


def _extended(x_info: Any, y_info: Any, data: Table, X: NDArray[np.float64], y: NDArray[np.float64]) -> tuple[Any, Any]:
    """Re-evaluate the design in extended precision so powers such as x**10 keep their digits.

    Falls back to the float64 design when a term is categorical or uses a
    stateful transform, or when the two evaluations disagree beyond rounding.
    """
    dtype = _ext_dtype()
    fallback = (ext.DD(X), ext.DD(y)) if _is_dd(dtype) else (X.astype(np.longdouble), y.astype(np.longdouble))
    codes = [f.code for t in x_info.terms for f in t.factors] + [f.code for t in y_info.terms for f in t.factors]
    if any(s in code for code in codes for s in _STATEFUL) or X.shape[1] != len(x_info.terms):
        return fallback
    plan = _plan_of(x_info, y_info)
    if plan is None:
        return fallback
    evaluated = _evaluate_design(plan, data, dtype)
    if evaluated is None:
        return fallback
    X_ext, y_ext = evaluated
    with np.errstate(all="ignore"):
        same = np.allclose(X_ext.astype(float), X, rtol=1e-12, atol=0) and np.allclose(
            y_ext.astype(float), y, rtol=1e-12, atol=0
        )
    return (X_ext, y_ext) if same else fallback


#: Where a column named like a function (Q, I, log, np, …) is kept in the data patsy sees, so that the name
#: still means the function; ``Q("name")`` reaches the column there.
_HIDDEN = "\x00column:"


def _for_patsy(columns: Mapping[str, Any]) -> dict[str, Any]:
    return {(_HIDDEN + k if k in CALLABLE_NAMES else k): v for k, v in columns.items()}


def _quoted(name: str) -> Any:
    """patsy's ``Q``, which also finds a column named like a function (see :data:`_HIDDEN`)."""
    import patsy  # noqa: PLC0415

    namespace = patsy.EvalEnvironment.capture(1).namespace  # the data being evaluated, as patsy's own Q does
    return namespace[_HIDDEN + name if name in CALLABLE_NAMES else name]


def _environment() -> Any:
    import patsy  # noqa: PLC0415

    return patsy.EvalEnvironment([{"np": np, "numpy": np, "Q": _quoted} | {f: getattr(np, f) for f in SAFE_FUNCTIONS}])


@dataclass(frozen=True, slots=True)
class Plan:
    """The terms of a formula whose terms are all products of numeric expressions, as patsy names them."""

    x_terms: tuple[tuple[str, ...], ...]  # the factor codes of each right-hand term (none: the intercept)
    x_names: tuple[str, ...]  # the design's column names
    y_code: str
    y_name: str


_PROBE = (2.0, 3.0, 5.0, 7.0)


def _plan(formula: str, used: tuple[str, ...]) -> Plan | None:
    """Term structure of a purely numeric formula, worked out once per formula and column set.

    Every column a formula uses is numeric here, so patsy's term order, names and
    column counts do not depend on the data: patsy runs once on a small probe table,
    and each dataset's design is then evaluated directly (in extended precision),
    checked once against patsy's own evaluation of the probe. The result is kept
    between builds (see :func:`_remember`).
    """
    known = _remembered("plan", formula, used)
    if isinstance(known, dict):
        if not known:
            return None
        cached: Plan | None
        try:
            cached = Plan(
                x_terms=tuple(tuple(str(c) for c in t) for t in known["x_terms"]),
                x_names=tuple(str(c) for c in known["x_names"]),
                y_code=str(known["y_code"]),
                y_name=str(known["y_name"]),
            )
        except (KeyError, TypeError):
            cached = None
        if cached is not None and _codes_allowed(cached, used):
            return cached
    plan = _probe_plan(formula, used)
    stored = (
        {"x_terms": [list(t) for t in plan.x_terms], "x_names": list(plan.x_names), "y_code": plan.y_code,
         "y_name": plan.y_name}
        if plan is not None
        else {}
    )  # fmt: skip
    _remember("plan", formula, stored, used)
    return plan


def _plan_of(x_info: Any, y_info: Any) -> Plan | None:
    """patsy's design infos as a :class:`Plan`, or None when the response is not a single factor."""
    try:
        (yterm,) = y_info.terms
        (yfactor,) = yterm.factors
    except ValueError:
        return None
    return Plan(
        x_terms=tuple(tuple(f.code for f in t.factors) for t in x_info.terms),
        x_names=tuple(str(c) for c in x_info.column_names),
        y_code=yfactor.code,
        y_name=str(y_info.column_names[0]),
    )


def _codes_allowed(plan: Plan, used: tuple[str, ...]) -> bool:
    """Every code of a plan read from the cache passes the same check as a sidecar's formula.

    The codes are evaluated; a cache file edited by hand must not get past the whitelist.
    """
    checker = _FactorChecker(set(used))
    try:
        for code in (*(c for term in plan.x_terms for c in term), plan.y_code):
            checker.visit(ast.parse(code.strip(), mode="eval"))
    except (FormulaError, SyntaxError, RecursionError, MemoryError, ValueError):
        return False
    return not checker.missing


def _probe_plan(formula: str, used: tuple[str, ...]) -> Plan | None:
    if any(name in formula for name in _STATEFUL):
        return None
    import patsy  # noqa: PLC0415

    probe = from_columns({c: np.array(_PROBE) for c in used})
    try:
        with np.errstate(all="ignore"):
            y_dm, x_dm = patsy.dmatrices(
                formula, _for_patsy(probe.as_dict()), eval_env=_environment(), return_type="matrix",
                NA_action=patsy.NAAction(NA_types=[]),
            )  # fmt: skip
    except (patsy.PatsyError, ValueError, TypeError, ArithmeticError, KeyError, NameError):
        return None
    candidate = _plan_of(x_dm.design_info, y_dm.design_info)
    if candidate is None or y_dm.shape[1] != 1 or x_dm.shape[1] != len(candidate.x_terms):
        return None
    mine = _evaluate_design(candidate, probe, np.float64)
    if mine is None or not (_same(mine[0], np.asarray(x_dm)) and _same(mine[1], np.asarray(y_dm)[:, 0])):
        return None
    return candidate


def _same(a: NDArray[Any], b: NDArray[Any]) -> bool:
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    with np.errstate(all="ignore"):
        return a.shape == b.shape and bool(np.allclose(a, b, rtol=1e-12, atol=0, equal_nan=True))


def _namespace(table: Table, dtype: Any) -> dict[str, Any]:
    dd = _is_dd(dtype)
    columns: dict[str, Any] = {
        name: ext.DD(values.astype(np.float64)) if dd else values.astype(dtype)
        for name, values in zip(table.names, table.columns, strict=True)
        if values.dtype.kind in "fiub"
    }
    namespace = dict(columns)
    namespace |= {  # a column named like one of these is reached through Q("name") only
        "np": np,
        "numpy": np,
        "I": lambda v: v,
        "Q": lambda name: columns[name],
        "__rows__": table.rows,
        "__dd__": dd,
    }
    namespace |= {f: getattr(np, f) for f in SAFE_FUNCTIONS}
    return namespace


def _evaluate_terms(x_terms: tuple[tuple[str, ...], ...], table: Table, dtype: Any) -> Any:
    """The design columns of the terms over ``table``, or None when they cannot be evaluated here."""
    namespace = _namespace(table, dtype)
    try:
        with np.errstate(all="ignore"):
            cols: list[Any] = []
            for factors in x_terms:
                col: Any = ext.DD(np.ones(len(table))) if _is_dd(dtype) else np.ones(len(table), dtype=dtype)
                for code in factors:
                    col = col * _evaluate(code, namespace).astype(dtype)
                cols.append(col)
    except (TypeError, ValueError, KeyError, NameError, ArithmeticError, AttributeError):
        return None
    if _is_dd(dtype):
        return ext.column_stack(cols) if cols else ext.DD(np.empty((len(table), 0)))
    return np.column_stack(cols) if cols else np.empty((len(table), 0), dtype=dtype)


def _evaluate_design(plan: Plan, table: Table, dtype: Any) -> tuple[Any, Any] | None:
    X = _evaluate_terms(plan.x_terms, table, dtype)
    if X is None:
        return None
    namespace = _namespace(table, dtype)
    try:
        with np.errstate(all="ignore"):
            y = _evaluate(plan.y_code, namespace).astype(dtype)
    except (TypeError, ValueError, KeyError, NameError, ArithmeticError, AttributeError):
        return None
    return X, y


def _finish_simple(
    plan: Plan,
    *,
    evaluated: tuple[Any, Any],
    data: Table,
    dropped: list[tuple[int, str]],
    intercept: bool,
    used: tuple[str, ...],
    name: str,
    formula: str,
) -> Design:
    X_ext, y_ext = evaluated
    X = X_ext.astype(float)
    y = y_ext.astype(float)
    rows = data.rows
    ok = _defined_rows(X, y, rows, dropped=dropped, name=name, formula=formula)
    if not bool(ok.all()):
        X, y, rows, X_ext, y_ext = X[ok], y[ok], rows[ok], X_ext[ok], y_ext[ok]
        data = data.take(ok)
    terms = plan.x_names
    _check_constant_terms(X, terms, intercept, name)
    return Design(
        X_ext=X_ext if isinstance(X_ext, ext.DD) else np.ascontiguousarray(X_ext),
        y_ext=y_ext if isinstance(y_ext, ext.DD) else np.ascontiguousarray(y_ext),
        X=np.ascontiguousarray(X),
        y=y,
        terms=terms,
        response=plan.y_name,
        rows=rows,
        dropped=tuple(sorted(dropped)),
        has_intercept=intercept,
        variables=used,
        data=data,
        design_info=plan,
        simple=True,
    )
