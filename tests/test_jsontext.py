"""JSON files written line by line (build.json, history.json, summary.json): the json module reads back
exactly what was written, whatever the keys hold (the json module is the independent reader)."""

from __future__ import annotations

import json

from hypothesis import given
from hypothesis import strategies as st

from sitegen.jsontext import json_text

_PLAIN = st.one_of(st.none(), st.booleans(), st.integers(), st.floats(allow_nan=False, allow_infinity=False), st.text())


_NESTED = st.recursive(
    _PLAIN, lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(), inner, max_size=3)
)


@given(st.dictionaries(st.text(), st.lists(_NESTED, max_size=4), max_size=6), st.dictionaries(st.text(), _PLAIN))
def test_manifests_and_flat_mappings_read_back_as_written(
    manifest: dict[str, list[object]], flat: dict[str, object]
) -> None:
    body = {"files": manifest, "flat": flat, "list": [manifest, flat]}
    assert json.loads(json_text(body)) == body


def test_a_manifest_has_one_file_per_line() -> None:
    text = json_text({"files": {"a.html": [1, 2, 3, 4], 'odd"],"name': [5], "z": []}})
    assert text.splitlines()[2:5] == ['  "a.html":[1,2,3,4],', '  "odd\\"],\\"name":[5],', '  "z":[]']
