"""Read and validate ``site.toml`` and the per-dataset TOML sidecars.

Validation names the exact key and what it expected; unknown keys are reported
with the closest known key. ``tomllib`` errors are translated here (the one
boundary for TOML) into :class:`~sitegen.errors.SidecarError` or
:class:`~sitegen.errors.SiteConfigError`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from sitegen.confine import read_inside
from sitegen.errors import OutsideFolderError, SidecarError, SidecarUnreadableError, SiteConfigError

LINE_CHOICES = ("reverse", "orthogonal", "deming", "geometric_mean", "passing_bablok")
PURPOSES = ("relation", "comparison", "calibration")
WEIGHTING_CHOICES = ("choose", "none", "1/x", "1/x²", "1/y²")
# Spellings of the weightings that are easier to type; each means the named choice.
_WEIGHTING_SPELLINGS = {"1/x^2": "1/x²", "1/x2": "1/x²", "1/y^2": "1/y²", "1/y2": "1/y²"}
DEFAULT_LEVEL = 0.95


@dataclass(frozen=True, slots=True)
class BiasLimit:
    """``max_bias``: the largest fitted bias (fitted y − x) allowed at each level in ``at``."""

    at: tuple[float, ...]
    limit: float | None = None
    limit_percent: float | None = None


@dataclass(frozen=True, slots=True)
class RequirementSpec:
    """The acceptance criteria a sidecar (or the site's defaults) declares under ``[requirements]``.

    Every field is optional; ``None`` means "not declared".
    """

    min_r_squared: float | None = None
    slope_within: tuple[float, float] | None = None
    intercept_within: tuple[float, float] | None = None
    slope_interval_includes: float | None = None
    intercept_interval_includes: float | None = None
    max_residual_sd: float | None = None
    back_calculated_within_percent: float | None = None
    lowest_within_percent: float | None = None
    max_bias: BiasLimit | None = None
    min_n: int | None = None

    def declared(self) -> tuple[str, ...]:
        """The names of the declared requirements, in the order of the README's table."""
        return tuple(f.name for f in fields(self) if getattr(self, f.name) is not None)

    def merged(self, over: RequirementSpec) -> RequirementSpec:
        """These requirements with every key ``over`` declares put in place of the same key here."""
        return RequirementSpec(
            **{f.name: getattr(over, f.name) if getattr(over, f.name) is not None else getattr(self, f.name)
               for f in fields(self)}
        )  # fmt: skip


@dataclass(frozen=True, slots=True)
class DatasetSpec:
    """Everything a sidecar (merged over the site's defaults) says about one dataset."""

    title: str | None = None
    description: str = ""
    tags: tuple[str, ...] = ()
    model: str | None = None
    level: float = DEFAULT_LEVEL
    units: tuple[tuple[str, str], ...] = ()
    claims: tuple[str, ...] = ()
    lines: tuple[str, ...] = ()
    error_ratio: float = 1.0
    calibrate: tuple[float, ...] = ()
    readings: int = 1
    predict_at: tuple[tuple[tuple[str, float], ...], ...] | tuple[float, ...] = ()
    weights: str | None = None
    reading_weight: float = 1.0  # the weight of one new reading in prediction intervals of a weighted fit
    robust: bool = False
    group: str | None = None
    compare: str | None = None
    delimiter: str | None = None
    decimal: str = "."
    encoding: str = "utf-8"
    purpose: str = "relation"
    decision_levels: tuple[float, ...] = ()
    weighting: str | None = None
    percent_differences: bool = False
    requirements: RequirementSpec | None = None
    leave_out: tuple[tuple[int, str], ...] = ()
    analyst: str | None = None
    reviewer: str | None = None
    method_reference: str | None = None
    # read and fit in chunks when the file has at least this many megabytes (None: site.toml's [limits])
    stream_above_megabytes: float | None = None
    unknown_keys: tuple[tuple[str, str | None], ...] = field(default=(), compare=False)


class _BadValueError(Exception):
    """A value failed validation; carries the expectation text."""


def _string(v: object) -> str:
    if not isinstance(v, str):
        raise _BadValueError("a string")
    return v


def _opt_string(v: object) -> str | None:
    return _string(v)


def _tags(v: object) -> tuple[str, ...]:
    if not isinstance(v, list) or not all(isinstance(t, str) for t in v):
        raise _BadValueError('a list of strings, e.g. ["calibration", "nutrients"]')
    return tuple(dict.fromkeys(t.strip() for t in v if t.strip()))


def _number(v: object) -> float:
    if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(float(v)):
        raise _BadValueError("a finite number")
    return float(v)


def _level(v: object) -> float:
    x = _number(v)
    if not 0.0 < x < 1.0:
        raise _BadValueError("a number strictly between 0 and 1, e.g. 0.95")
    return x


def _positive(v: object) -> float:
    x = _number(v)
    if x <= 0:
        raise _BadValueError("a positive number")
    return x


def _not_negative(v: object) -> float:
    x = _number(v)
    if x < 0 or not math.isfinite(x):
        raise _BadValueError("a number of megabytes, 0 or more (0: always read in chunks)")
    return x


def _readings(v: object) -> int:
    if isinstance(v, bool) or not isinstance(v, int) or v < 1:
        raise _BadValueError("a whole number of at least 1")
    return v


def _boolean(v: object) -> bool:
    if not isinstance(v, bool):
        raise _BadValueError("true or false")
    return v


def _numbers(v: object) -> tuple[float, ...]:
    if not isinstance(v, list):
        raise _BadValueError("a list of numbers, e.g. [0.5, 1.25]")
    return tuple(_number(x) for x in v)


def _units(v: object) -> tuple[tuple[str, str], ...]:
    if not isinstance(v, dict) or not all(isinstance(u, str) for u in v.values()):
        raise _BadValueError('a table of column = "unit", e.g. { conc = "mg/L" }')
    return tuple(sorted((str(k), str(u)) for k, u in v.items()))


def _claims(v: object) -> tuple[str, ...]:
    if isinstance(v, str):
        v = [v]
    if not isinstance(v, list) or not all(isinstance(c, str) and c.strip() for c in v):
        raise _BadValueError('a list of hypotheses as strings, e.g. ["x = 1", "Intercept = 0"]')
    return tuple(c.strip() for c in v)


def _lines(v: object) -> tuple[str, ...]:
    if not isinstance(v, list) or not all(isinstance(c, str) for c in v):
        raise _BadValueError(f"a list chosen from {', '.join(LINE_CHOICES)}")
    bad = [c for c in v if c not in LINE_CHOICES]
    if bad:
        hint = _closest(bad[0], LINE_CHOICES)
        extra = f" (did you mean {hint!r}?)" if hint else ""
        raise _BadValueError(f"a list chosen from {', '.join(LINE_CHOICES)}; {bad[0]!r} is not one{extra}")
    return tuple(dict.fromkeys(v))


def _predict_at(v: object) -> tuple[tuple[tuple[str, float], ...], ...] | tuple[float, ...]:
    if not isinstance(v, list):
        raise _BadValueError("a list of x values, or a list of tables such as { flow = 12, head = 30 }")
    if all(isinstance(x, dict) for x in v):
        rows = []
        for row in v:
            assert isinstance(row, dict)
            if not row:
                raise _BadValueError("a list of x values, or of tables such as { flow = 12 }; {} is empty")
            rows.append(tuple(sorted((str(k), _number(x)) for k, x in row.items())))
        return tuple(rows)
    return _numbers(v)


def _delimiter(v: object) -> str:
    s = _string(v)
    if s in ("\\t", "tab"):
        s = "\t"
    if len(s) != 1 or s in "\"'\n\r" or s.isalnum():
        raise _BadValueError('one separator character such as ",", ";", "|" or "\\t"')
    return s


def _decimal(v: object) -> str:
    s = _string(v)
    if s not in (".", ","):
        raise _BadValueError('"." or ","')
    return s


def _encoding(v: object) -> str:
    import codecs  # noqa: PLC0415 - only needed when the key is given

    s = _string(v)
    sample = "x,y\n1.5,-2e3\n"
    try:
        name = codecs.lookup(s).name
        sample.encode(s).decode(s)  # rejects codecs that are not text encodings (rot13, base64, …)
        # A file's encoding reads plain ASCII text as itself, with "replace" for odd bytes (which idna,
        # punycode and the like cannot do); UTF-16 and UTF-32 are the exceptions, and are checked when read.
        if not name.startswith(("utf-16", "utf-32")):
            ascii_ok = sample.encode("ascii").decode(s, errors="replace") == sample
            b"\xff\xfe\x80 ".decode(s, errors="replace")
            if not ascii_ok:
                raise ValueError(s)
    except (LookupError, ValueError):
        raise _BadValueError('a text encoding name such as "utf-8", "latin-1" or "cp1252"') from None
    return s


def _purpose(v: object) -> str:
    s = _string(v)
    if s not in PURPOSES:
        hint = _closest(s, PURPOSES)
        extra = f" (did you mean {hint!r}?)" if hint else ""
        raise _BadValueError(f"one of {', '.join(repr(p) for p in PURPOSES)}{extra}")
    return s


def _weighting(v: object) -> str:
    s = _string(v).strip().replace(" ", "")
    s = _WEIGHTING_SPELLINGS.get(s, s)
    if s not in WEIGHTING_CHOICES:
        hint = _closest(s, WEIGHTING_CHOICES)
        extra = f" (did you mean {hint!r}?)" if hint else ""
        raise _BadValueError(f"one of {', '.join(repr(w) for w in WEIGHTING_CHOICES)}{extra}")
    return s


def _window(v: object) -> tuple[float, float]:
    if not isinstance(v, list) or len(v) != 2:
        raise _BadValueError("a window of two numbers [low, high], e.g. [0.98, 1.02]")
    lo, hi = _number(v[0]), _number(v[1])
    if lo > hi:
        raise _BadValueError(f"a window [low, high] with low ≤ high; {lo:g} is above {hi:g}")
    return lo, hi


def _fraction(v: object) -> float:
    x = _number(v)
    if not 0.0 <= x <= 1.0:
        raise _BadValueError("a number from 0 to 1, e.g. 0.995")
    return x


def _nonnegative(v: object) -> float:
    x = _number(v)
    if x < 0:
        raise _BadValueError("a number of at least 0")
    return x


def _percent_limit(v: object) -> float:
    x = _number(v)
    if not 0.0 < x <= 100.0:
        raise _BadValueError("a percentage above 0 and at most 100, e.g. 15")
    return x


def _count(v: object) -> int:
    if isinstance(v, bool) or not isinstance(v, int) or v < 1:
        raise _BadValueError("a whole number of at least 1")
    return v


_BIAS_KEYS = ("at", "limit", "limit_percent")


def _bias_limit(v: object) -> BiasLimit:
    example = "a table such as { at = [1.0, 4.0], limit = 0.1 } (and/or limit_percent = 5)"
    if not isinstance(v, dict):
        raise _BadValueError(example)
    for key in v:
        if key not in _BIAS_KEYS:
            hint = _closest(str(key), _BIAS_KEYS)
            raise _BadValueError(f"{example}; {key!r} is not one of {', '.join(_BIAS_KEYS)}" + _did_you_mean(hint))
    if "at" not in v or ("limit" not in v and "limit_percent" not in v):
        raise _BadValueError(f"{example}: 'at' and at least one of 'limit' and 'limit_percent'")
    at = _numbers(v["at"])
    if not at:
        raise _BadValueError(f"{example}; 'at' is empty")
    limit = _nonnegative(v["limit"]) if "limit" in v else None
    limit_percent = _percent_limit(v["limit_percent"]) if "limit_percent" in v else None
    return BiasLimit(tuple(dict.fromkeys(at)), limit, limit_percent)


def _leave_out(v: object) -> tuple[tuple[int, str], ...]:
    example = 'a list of tables such as { row = 7, reason = "air bubble in the cell" }'
    if not isinstance(v, list):
        raise _BadValueError(example)
    out: dict[int, str] = {}
    for item in v:
        if not isinstance(item, dict) or set(item) != {"row", "reason"}:
            raise _BadValueError(f"{example}; each entry needs exactly 'row' and 'reason'")
        row, reason = item["row"], item["reason"]
        if isinstance(row, bool) or not isinstance(row, int) or row < 1:
            raise _BadValueError(f"{example}; 'row' is a CSV data row number from 1 (the header not counted)")
        if not isinstance(reason, str) or not reason.strip():
            raise _BadValueError(f"{example}; every row left out needs its reason, as text")
        if row in out:
            raise _BadValueError(f"{example}; row {row} is listed twice")
        out[row] = reason.strip()
    return tuple(sorted(out.items()))


_REQUIREMENT_KEYS: Mapping[str, Callable[[object], Any]] = {
    "min_r_squared": _fraction,
    "slope_within": _window,
    "intercept_within": _window,
    "slope_interval_includes": _number,
    "intercept_interval_includes": _number,
    "max_residual_sd": _nonnegative,
    "back_calculated_within_percent": _percent_limit,
    "lowest_within_percent": _percent_limit,
    "max_bias": _bias_limit,
    "min_n": _count,
}
REQUIREMENT_KEYS = tuple(_REQUIREMENT_KEYS)
assert set(REQUIREMENT_KEYS) == {f.name for f in fields(RequirementSpec)}


def _did_you_mean(hint: str | None) -> str:
    return f" (did you mean {hint!r}?)" if hint else ""


class _RequirementError(_BadValueError):
    """A fault inside ``[requirements]``; its text is the whole message after the file's name."""


def _requirements(v: object) -> RequirementSpec:
    """``[requirements]``: an unknown or misspelt criterion is an error (a criterion silently dropped would
    let a site say "met" about something nobody checked)."""
    if not isinstance(v, dict):
        raise _BadValueError("a table of acceptance criteria, e.g. [requirements] with min_r_squared = 0.995")
    values: dict[str, Any] = {}
    for key, value in v.items():
        check = _REQUIREMENT_KEYS.get(key)
        if check is None:
            text = unknown_key("[requirements]", str(key), _closest(str(key), REQUIREMENT_KEYS), what="criterion")
            raise _RequirementError(f"{text} (the criteria are {', '.join(REQUIREMENT_KEYS)})")
        try:
            values[key] = check(value)
        except _BadValueError as exc:
            raise _RequirementError(f"[requirements] key '{key}' must be {exc}; got {_show(value)}") from None
    if "lowest_within_percent" in values and "back_calculated_within_percent" not in values:
        raise _RequirementError(
            "[requirements] key 'lowest_within_percent' needs 'back_calculated_within_percent' beside it "
            "(it loosens that criterion for the lowest level)"
        )
    return RequirementSpec(**values)


_KEYS: Mapping[str, Callable[[object], Any]] = {
    "title": _opt_string,
    "description": _string,
    "tags": _tags,
    "model": _opt_string,
    "level": _level,
    "units": _units,
    "claims": _claims,
    "lines": _lines,
    "error_ratio": _positive,
    "calibrate": _numbers,
    "readings": _readings,
    "predict_at": _predict_at,
    "weights": _opt_string,
    "reading_weight": _positive,
    "robust": _boolean,
    "group": _opt_string,
    "compare": _opt_string,
    "delimiter": _delimiter,
    "decimal": _decimal,
    "encoding": _encoding,
    "purpose": _purpose,
    "decision_levels": _numbers,
    "weighting": _weighting,
    "percent_differences": _boolean,
    "requirements": _requirements,
    "leave_out": _leave_out,
    "analyst": _opt_string,
    "reviewer": _opt_string,
    "method_reference": _opt_string,
    "stream_above_megabytes": _not_negative,
}
SIDECAR_KEYS = tuple(sorted(_KEYS))
assert set(_KEYS) == {f.name for f in fields(DatasetSpec)} - {"unknown_keys"}


def unknown_key(where: str, key: str, hint: str | None, *, what: str = "key", ending: str = "") -> str:
    """The one wording for a key sitegen does not know: ``WHERE: unknown WHAT 'KEY'ENDING; did you mean 'HINT'?``
    (a key longer than 60 characters is cut)."""
    shown = key if len(key) <= 60 else key[:57] + "..."
    return f"{where}: unknown {what} '{shown}'{ending}" + (f"; did you mean '{hint}'?" if hint else "")


def _closest(word: str, choices: tuple[str, ...] | list[str]) -> str | None:
    import difflib  # noqa: PLC0415 - only a misspelt key needs it

    match = difflib.get_close_matches(word, choices, n=1, cutoff=0.6)
    return match[0] if match else None


_TOML_HINT = 'fix the place named; each setting is key = value, with text in double quotes, e.g. title = "Nitrate"'


def _toml_hint(exc: ValueError) -> str | None:
    import tomllib  # noqa: PLC0415 - a rebuild with nothing to do reads no TOML

    return _TOML_HINT if isinstance(exc.__cause__, tomllib.TOMLDecodeError) else None


#: Largest sidecar or site.toml read (a few keys take a few hundred bytes).
MAX_TOML_BYTES = 1_000_000
#: Deepest nesting of lists and tables a sidecar or site.toml may hold.
MAX_TOML_DEPTH = 16
#: Longest text a key may hold, by key (others: :data:`_MAX_TEXT`), and most entries a list or table may hold.
_MAX_TEXT_BY_KEY = {"title": 500, "description": 50_000, "model": 10_000}
_MAX_TEXT = 2_000
_MAX_ENTRIES = 1_000
#: Unknown keys named one by one in messages; the rest are counted.
MAX_UNKNOWN_SHOWN = 10


class _ReadFailedError(ValueError):
    """The file could not be read at all (an ``OSError``), as opposed to read and found wrong."""


def _read_toml(path: Path, root: Path | None = None) -> dict[str, Any]:
    """Parse a TOML file (refused unread when it leads outside ``root``); raises ``ValueError`` with a readable
    message."""
    try:
        raw = read_inside(path, root, MAX_TOML_BYTES)
    except OutsideFolderError as exc:
        raise ValueError(exc.message) from None
    except OSError as exc:
        raise _ReadFailedError(f"cannot be read: {exc.strerror or exc}") from exc
    if len(raw) > MAX_TOML_BYTES:
        raise ValueError(
            f"is larger than {MAX_TOML_BYTES // 1_000_000} MB, far more than any settings need; "
            "check that it is the right file"
        )
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ValueError(f"is not UTF-8 text (byte {exc.start}); save it as UTF-8") from exc
    import tomllib  # noqa: PLC0415 - a rebuild with nothing to do reads no TOML

    try:
        table = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ValueError(f"is not valid TOML: {exc}") from exc
    except RecursionError as exc:
        raise ValueError(
            f"is nested too deeply to be read (lists or tables within each other more than {MAX_TOML_DEPTH} deep)"
        ) from exc
    if _depth(table) > MAX_TOML_DEPTH:
        raise ValueError(f"holds lists or tables nested more than {MAX_TOML_DEPTH} deep; no setting needs that")
    return table


def _depth(value: object) -> int:
    """How deeply lists and tables nest in a parsed TOML value (without recursion)."""
    deepest, stack = 0, [(value, 0)]
    while stack:
        item, level = stack.pop()
        deepest = max(deepest, level)
        if isinstance(item, dict):
            stack.extend((v, level + 1) for v in item.values())
        elif isinstance(item, list):
            stack.extend((v, level + 1) for v in item)
    return deepest


def _size_problem(key: str, value: object) -> str | None:
    """What is too large about a key's value (too long a text, too many entries), or None."""
    longest = _MAX_TEXT_BY_KEY.get(key, _MAX_TEXT)
    entries, stack = 0, [value]
    while stack:
        item = stack.pop()
        if isinstance(item, str) and len(item) > longest:
            return f"holds a text of {len(item):,} characters, more than the {longest:,} allowed"
        if isinstance(item, dict):
            entries += len(item)
            stack.extend(item.values())
            stack.extend(k for k in item if len(k) > longest)
        elif isinstance(item, list):
            entries += len(item)
            stack.extend(item)
        if entries > _MAX_ENTRIES:
            return f"holds more than {_MAX_ENTRIES:,} entries"
    return None


def validate_keys(table: Mapping[str, object], where: str) -> tuple[dict[str, Any], list[tuple[str, str | None]]]:
    """Validate sidecar-style keys; returns (clean values, unknown keys with suggestions)."""
    clean: dict[str, Any] = {}
    unknown: list[tuple[str, str | None]] = []
    for key, value in table.items():
        check = _KEYS.get(key)
        if check is None:
            shown = key if len(key) <= 60 else key[:57] + "..."
            hint = _closest(key, SIDECAR_KEYS) if len(key) <= 60 else None
            if key == "limits":  # site.toml's table; the one limit a sidecar may set stands at its top level
                hint = "stream_above_megabytes"
            if hint == "requirements":  # a misspelt [requirements] would drop every criterion without a word
                raise SidecarError(
                    f"{where}: unknown key '{shown}' looks like a misspelt 'requirements'; its acceptance "
                    "criteria would be ignored",
                    hint="rename the table to [requirements]",
                )
            unknown.append((shown, hint))
            continue
        too_large = _size_problem(key, value)
        if too_large:
            raise SidecarError(f"{where}: key '{key}' {too_large}", hint="shorten it")
        try:
            clean[key] = check(value)
        except _RequirementError as exc:
            raise SidecarError(f"{where}: {exc}") from None
        except _BadValueError as exc:
            raise SidecarError(f"{where}: key '{key}' must be {exc}; got {_show(value)}") from None
    return clean, unknown


def _show(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def read_sidecar(path: Path | None, defaults: Mapping[str, Any], display: str, root: Path | None = None) -> DatasetSpec:
    """Merge a sidecar over the site's validated defaults into a :class:`DatasetSpec`; a sidecar that leads
    outside the data folder ``root`` is refused unread."""
    values = dict(defaults)
    unknown: list[tuple[str, str | None]] = []
    if path is not None:
        try:
            table = _read_toml(path, root)
        except _ReadFailedError as exc:
            raise SidecarUnreadableError(f"{display} {exc}", hint=_toml_hint(exc)) from exc
        except ValueError as exc:
            raise SidecarError(f"{display} {exc}", hint=_toml_hint(exc)) from exc
        clean, unknown = validate_keys(table, display)
        base = values.get("requirements")
        if isinstance(base, RequirementSpec) and isinstance(clean.get("requirements"), RequirementSpec):
            clean["requirements"] = base.merged(clean["requirements"])  # key by key over the site's defaults
        values.update(clean)
    if values.get("purpose") == "comparison" and "lines" not in values:
        values["lines"] = ("passing_bablok",)  # the comparison's robust line, unless lines are chosen
    return DatasetSpec(**values, unknown_keys=tuple(unknown))


#: Files from this size on are read and fitted in chunks by default (measured: see README, "Files larger than memory").
STREAM_ABOVE_MEGABYTES = 10.0
#: Below this size a file whose sidecar asks for what only the whole-file fit offers (weights, groups, lines…)
#: is read whole when the chunk threshold is the built-in one (the built-in threshold was this size before).
WHOLE_WITH_KEYS_BELOW_MEGABYTES = 200.0
#: Rows per chunk of the chunked reader (a chunk's working memory is about 2 kB a row: see README).
STREAM_CHUNK_ROWS = 16_384


@dataclass(frozen=True, slots=True)
class Limits:
    """Resource bounds for one CSV file."""

    max_megabytes: float = 512.0
    max_rows: int = 5_000_000
    max_columns: int = 200
    max_fit_seconds: float = 600.0  # processor time one dataset's fit may take (3x that by the clock)
    max_fit_megabytes: float = 6000.0  # memory one dataset's fit may take beyond what its worker holds
    max_page_seconds: float = 60.0  # time (by the clock) one page of a user theme may take to render
    #: a CSV file of at least this many megabytes is read and fitted in chunks (sitegen/stream); 0: always
    stream_above_megabytes: float = STREAM_ABOVE_MEGABYTES
    stream_chunk_rows: int = STREAM_CHUNK_ROWS  # rows read and fitted at a time when reading in chunks


@dataclass(frozen=True, slots=True)
class SiteConfig:
    """Site-wide settings from ``site.toml``."""

    title: str = "Regression reports"
    description: str = ""
    theme: str = "default"
    offer_source: bool = False
    static_images: bool = False
    mail_budget_megabytes: float = 20.0
    defaults: tuple[tuple[str, Any], ...] = ()
    limits: Limits = Limits()
    ignore: tuple[str, ...] = ()  # glob patterns of files and folders the build skips


_SITE_KEYS = (
    "title",
    "description",
    "theme",
    "offer_source",
    "static_images",
    "mail_budget_megabytes",
    "defaults",
    "limits",
    "ignore",
)
_LIMIT_KEYS = (
    "max_megabytes",
    "max_rows",
    "max_columns",
    "max_fit_seconds",
    "max_fit_megabytes",
    "max_page_seconds",
    "stream_above_megabytes",
    "stream_chunk_rows",
)


def _site_error(msg: str) -> SiteConfigError:
    return SiteConfigError(f"site.toml: {msg}")


def _unknown_site_keys(table: Mapping[str, object]) -> list[str]:
    """Warnings for the keys of site.toml that sitegen does not know (the first few by name)."""
    warnings = []
    strange = [key for key in table if key not in _SITE_KEYS]
    for key in strange[:MAX_UNKNOWN_SHOWN]:
        hint = (_closest(key, _SITE_KEYS) or _closest(key, SIDECAR_KEYS)) if len(key) <= 60 else None
        warnings.append(unknown_key("site.toml", key, hint, ending=" is ignored"))
    if len(strange) > MAX_UNKNOWN_SHOWN:
        warnings.append(f"site.toml: {len(strange) - MAX_UNKNOWN_SHOWN:,} more unknown keys are ignored")
    return warnings


def read_site_config(path: Path, root: Path | None = None) -> tuple[SiteConfig, list[str]]:
    """Read ``site.toml`` (absent → defaults; leading outside the data folder ``root`` → refused unread).
    Returns the config and warnings."""
    if not os.path.lexists(path):
        return SiteConfig(), []
    try:
        table = _read_toml(path, root)
    except ValueError as exc:
        raise SiteConfigError(f"site.toml {exc}", hint=_toml_hint(exc)) from exc
    warnings: list[str] = []
    warnings += _unknown_site_keys(table)
    values: dict[str, Any] = {}
    for key in ("title", "description", "theme"):
        if key in table:
            if not isinstance(table[key], str):
                raise _site_error(f"key '{key}' must be a string; got {_show(table[key])}")
            too_large = _size_problem(key, table[key])
            if too_large:
                raise _site_error(f"key '{key}' {too_large}; shorten it")
            values[key] = table[key]
    for key in ("offer_source", "static_images"):
        if key in table:
            if not isinstance(table[key], bool):
                raise _site_error(f"key '{key}' must be true or false; got {_show(table[key])}")
            values[key] = table[key]
    if "mail_budget_megabytes" in table:
        values["mail_budget_megabytes"] = _site_value(table, "mail_budget_megabytes", _positive)
    defaults = table.get("defaults", {})
    if not isinstance(defaults, dict):
        raise _site_error("[defaults] must be a table of sidecar keys")
    try:
        clean, unknown = validate_keys(defaults, "site.toml [defaults]")
    except SidecarError as exc:
        raise SiteConfigError(exc.message) from None
    warnings += [
        unknown_key("site.toml [defaults]", k, h, ending=" is ignored") for k, h in unknown[:MAX_UNKNOWN_SHOWN]
    ]
    if len(unknown) > MAX_UNKNOWN_SHOWN:
        warnings.append(f"site.toml [defaults]: {len(unknown) - MAX_UNKNOWN_SHOWN:,} more unknown keys are ignored")
    values["defaults"] = tuple(sorted(clean.items()))
    values["limits"] = _read_limits(table.get("limits", {}))
    values["ignore"] = _read_ignore(table.get("ignore", []))
    return SiteConfig(**values), warnings


MAX_IGNORE_PATTERNS = 200


def _read_ignore(value: object) -> tuple[str, ...]:
    """site.toml's ``ignore``: a list of glob patterns, each naming files or folders inside the data folder."""
    if not isinstance(value, list):
        example = '["drafts", "*.old.csv"]'
        raise _site_error(f"key 'ignore' must be a list of glob patterns such as {example}; got {_show(value)}")
    if len(value) > MAX_IGNORE_PATTERNS:
        raise _site_error(f"key 'ignore' has {len(value)} patterns; at most {MAX_IGNORE_PATTERNS} are allowed")
    out: list[str] = []
    for item in value:
        if not isinstance(item, str) or not item.strip():
            raise _site_error(f"key 'ignore' must hold non-empty strings (glob patterns); got {_show(item)}")
        if item.startswith("/") or ".." in item.split("/") or "\\" in item or "\x00" in item:
            raise _site_error(
                f"ignore pattern '{item}' must be a name or a path inside the data folder "
                "(no leading '/', no '..', '/' as the separator)"
            )
        out.append(item)
    return tuple(out)


def _read_limits(table: object) -> Limits:
    if not isinstance(table, dict):
        raise _site_error("[limits] must be a table")
    for key in table:
        if key not in _LIMIT_KEYS:
            raise _site_error(unknown_key("[limits]", key, _closest(key, _LIMIT_KEYS)))
    out: dict[str, Any] = {}
    if "stream_above_megabytes" in table:
        out["stream_above_megabytes"] = _site_value(table, "stream_above_megabytes", _not_negative, "[limits] key")
    for key in ("max_rows", "max_columns", "stream_chunk_rows"):
        if key in table:
            v = table[key]
            if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                raise _site_error(f"[limits] key '{key}' must be a positive whole number; got {_show(v)}")
            out[key] = v
    for key in ("max_megabytes", "max_fit_seconds", "max_fit_megabytes", "max_page_seconds"):
        if key in table:
            out[key] = _site_value(table, key, _positive, "[limits] key")
    return Limits(**out)


def _site_value(table: dict[str, Any], key: str, check: Callable[[object], float], what: str = "key") -> float:
    """site.toml's ``table[key]`` as ``check`` reads it; a value it refuses is a :class:`SiteConfigError`."""
    try:
        return check(table[key])
    except _BadValueError as exc:
        raise _site_error(f"{what} '{key}' must be {exc}; got {_show(table[key])}") from None
