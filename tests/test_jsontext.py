"""Compact JSON (sitegen/jsontext.compact, written by orjson) against the standard library's json module as the
independent reference: the same values read back, float for float, and the same refusals."""

from __future__ import annotations

import json
import math
import struct

import numpy as np
import pytest

from sitegen.jsontext import compact


def _random_floats(n: int) -> list[float]:
    """Doubles from random bit patterns (every exponent, subnormals included), finite ones only."""
    rng = np.random.default_rng(16)
    out = []
    for bits in rng.integers(0, 2**64, size=4 * n, dtype=np.uint64).tolist():
        v = struct.unpack("<d", struct.pack("<Q", bits))[0]
        if math.isfinite(v):
            out.append(v)
    return out[:n]


def test_every_float_reads_back_as_itself() -> None:
    values = [*_random_floats(20_000), 0.0, -0.0, 5e-324, 1.7976931348623157e308, 1e-5, 2.4643078313698e-05, 0.1]
    text = compact({"values": values})
    back = json.loads(text)["values"]
    assert len(back) == len(values)
    assert all(struct.pack("<d", a) == struct.pack("<d", b) for a, b in zip(back, values, strict=True))


def test_the_same_structure_as_the_standard_library_writes() -> None:
    value = {
        "b": [1, 2.5, None, True, "tëxt < & \u2028"],
        "a": {"z": (1.0, 2.0), "y": np.float64(3.25), "x": np.int64(7)},
        "c": [{"k": [0.5, -1e-300]}],
    }
    ours = json.loads(compact(value))
    theirs = json.loads(json.dumps(value, sort_keys=True, ensure_ascii=False, default=lambda v: v.item()))
    assert ours == theirs
    assert compact(value).index('"a"') < compact(value).index('"b"') < compact(value).index('"c"')  # sorted keys
    assert "tëxt" in compact(value)  # text as it is, not ASCII-escaped


def test_what_orjson_does_not_take_is_written_by_the_standard_library() -> None:
    assert json.loads(compact({"big": 2**70})) == {"big": 2**70}
    assert compact({1: "one"}) == json.dumps({1: "one"}, separators=(",", ":"))


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf, np.float64("nan")])
def test_a_float_that_is_not_finite_is_refused_as_json_refuses_it(bad: float) -> None:
    with pytest.raises(ValueError, match="not finite"):
        compact({"rows": [(1.0, 2.0), (3.0, bad)]})
    with pytest.raises(ValueError, match="Out of range float values are not JSON compliant"):
        json.dumps({"v": bad}, allow_nan=False)
