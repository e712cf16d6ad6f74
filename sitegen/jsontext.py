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
            # lists (a file manifest): one encoder call, then a line break before each key. Inside a JSON
            # string a quote is escaped, so '],"' is always between two values: a line break there is
            # whitespace between tokens (before the next key, or inside a nested list), never in a string.
            flat = json.dumps(value, sort_keys=True, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
            return "{\n  " + flat[1:-1].replace('],"', '],\n  "') + "\n }"
        return "{\n  " + ",\n  ".join(f"{_dumps(k)}: {_dumps(v)}" for k, v in sorted(value.items())) + "\n }"
    return _dumps(value)


def json_text(body: dict[str, Any] | list[Any]) -> str:
    """``body`` as JSON text ending in a line break (NaN and infinities are refused, as in JSON)."""
    if isinstance(body, list):
        return ("[\n " + ",\n ".join(_dumps(v) for v in body) + "\n]\n") if body else "[]\n"
    return "{\n" + ",\n".join(f" {_dumps(k)}: {_block(v)}" for k, v in sorted(body.items())) + "\n}\n"
