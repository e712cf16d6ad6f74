"""JSON files people read as well as programs: one top-level entry, list item or mapping entry per line.

``json.dumps(indent=...)`` switches to the pure-Python encoder, which dominated a rebuild with
nothing to do; here every line is written by the C encoder. Keys are sorted, so the same data
give the same bytes.
"""

from __future__ import annotations

import json
from typing import Any


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
