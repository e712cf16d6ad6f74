"""JSON text: files people read as well as programs (one top-level entry, list item or mapping entry per
line), and compact JSON for the figures of ``fit.json`` and the data of the page's charts.

``json.dumps(indent=...)`` switches to the pure-Python encoder, which dominated a rebuild with
nothing to do; here every line is written by the C encoder. Keys are sorted, so the same data
give the same bytes.

Compact JSON (:func:`compact`) is written by orjson: a dataset's ``fit.json`` (some 2,600 floats for a 200-row
fit) took 1.0 ms with the standard library's C encoder and takes 0.05 ms with orjson, the largest single cost
of a dataset's build (measured on this machine). Both write every float as its shortest round-trip digits;
orjson spells numbers below 1e-4 without an exponent where it can (``0.000024643`` for ``2.4643e-05``), which
reads back to the same float. What orjson does not take (a whole number beyond 64 bits, a key that is not a
string) is written by the standard library.
"""

from __future__ import annotations

import json
import math
from typing import Any


def compact(value: Any) -> str:
    """``value`` as compact JSON with sorted keys and text as it is (not ASCII-escaped); a float that is not
    finite is refused."""
    import orjson  # noqa: PLC0415 - only what writes fit.json and pages needs it

    _refuse_nonfinite(value)
    try:
        return orjson.dumps(value, option=orjson.OPT_SORT_KEYS | orjson.OPT_SERIALIZE_NUMPY).decode("utf-8")
    except orjson.JSONEncodeError:
        return json.dumps(value, sort_keys=True, ensure_ascii=False, allow_nan=False, separators=(",", ":"))


def _refuse_nonfinite(value: Any) -> None:
    """A ValueError for NaN or an infinity anywhere in ``value`` (orjson would write them as null; JSON has no
    such numbers, and the figures that may be missing are None before they get here)."""
    kind = type(value)
    if kind is float:
        if not math.isfinite(value):
            raise ValueError(f"a float that is not finite ({value}) cannot be written as JSON")
    elif kind is dict:
        for v in value.values():
            _refuse_nonfinite(v)
    elif kind is list or kind is tuple:
        try:  # a run of numbers: one sum, in C (NaN or an infinity makes it so)
            if math.isfinite(sum(value)):
                return
        except TypeError:
            pass
        for v in value:
            _refuse_nonfinite(v)
    elif isinstance(value, float) and not math.isfinite(value):
        raise ValueError(f"a float that is not finite ({value}) cannot be written as JSON")


def _dumps(value: Any) -> str:
    return json.dumps(value, sort_keys=True, ensure_ascii=False, allow_nan=False)


def _block(value: Any) -> str:
    if isinstance(value, list) and value:
        return "[\n  " + ",\n  ".join(_dumps(v) for v in value) + "\n ]"
    if isinstance(value, dict) and value:
        if all(v is None or isinstance(v, str | int | float) for v in value.values()):  # flat: one encoder call
            flat = json.dumps(value, sort_keys=True, ensure_ascii=False, allow_nan=False, separators=(",\n  ", ": "))
            return "{\n  " + flat[1:-1] + "\n }"
        if all(isinstance(v, list) for v in value.values()):
            # lists (a file manifest): one encoder call, then a line break before each key. Every entry
            # but the last ends in '],"' (its list, then the next key), so there are len - 1 such places;
            # any more means a string that ends in '],' (or a nested list before a string), where a line
            # break could fall inside a string: then the entries are written one by one below.
            flat = json.dumps(value, sort_keys=True, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
            if flat.count('],"') == len(value) - 1:
                return "{\n  " + flat[1:-1].replace('],"', '],\n  "') + "\n }"
        return "{\n  " + ",\n  ".join(f"{_dumps(k)}: {_dumps(v)}" for k, v in sorted(value.items())) + "\n }"
    return _dumps(value)


def json_text(body: dict[str, Any] | list[Any]) -> str:
    """``body`` as JSON text ending in a line break (NaN and infinities are refused, as in JSON)."""
    if isinstance(body, list):
        return ("[\n " + ",\n ".join(_dumps(v) for v in body) + "\n]\n") if body else "[]\n"
    return "{\n" + ",\n".join(f" {_dumps(k)}: {_block(v)}" for k, v in sorted(body.items())) + "\n}\n"
