"""Property-based tests (hypothesis): no input crashes a build or yields a site that breaks the contract.

* random bytes (and random CSV-like text) as a dataset: the build exits 0 or 1,
  prints no traceback, and the dataset has its summary row and page;
* random but valid numeric tables (2–4 columns, 0–40 rows, missing cells
  sprinkled): the summary row follows the contract (DESIGN.md, "Output layout"):
  ``n`` counts the complete rows, ``df_resid = n − p``, R² lies in [0, 1],
  ``coefficients.csv`` has one row per term in the model's order and
  ``observations.csv`` one row per used CSV row; and when the design is well
  conditioned the estimates agree with ``numpy.linalg.lstsq`` (an independent
  computation);
* random sidecars (known keys with plausible and implausible values, unknown
  keys, nested tables): never a crash or an internal error.

Each example is one real build through the CLI with ``-j 1``, so the example
counts are kept small; ``derandomize`` makes every run (and CI) see the same
examples, and no example database is written into the project.
"""

from __future__ import annotations

import csv
import json
import math
import tempfile
from pathlib import Path

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_corpus import CONTROL, CONTROL_SLUG, assert_clean_output, assert_site_sound, run

from sitegen.spec import SIDECAR_KEYS

SETTINGS = settings(
    max_examples=30,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.too_slow],
)


def _build(tmp: Path, files: dict[str, bytes]) -> tuple[dict[str, dict[str, str]], Path]:
    """Build the control dataset plus ``files`` in ``tmp/data``; returns the summary rows and the site."""
    data = tmp / "data"
    data.mkdir()
    (data / CONTROL.name).write_bytes(CONTROL.read_bytes())
    for name, raw in files.items():
        (data / name).write_bytes(raw)
    site = tmp / "site"
    result = run(data, site)
    assert_clean_output(result)
    assert result.code in (0, 1), result.output
    rows = assert_site_sound(site)
    assert rows[CONTROL_SLUG]["status"] == "ok", rows[CONTROL_SLUG]
    assert result.code == (1 if any(r["status"] == "error" for r in rows.values()) else 0)
    assert sorted(p.name for p in tmp.iterdir()) == ["data", "site"]  # no build folder left behind
    return rows, site


def _scratch() -> tempfile.TemporaryDirectory[str]:
    return tempfile.TemporaryDirectory(prefix="sitegen-prop-")


# --- random bytes --------------------------------------------------------------------------------

_CSV_ALPHABET = [*"0123456789.,;\t|\"'-+eE xyzé µ\n\r=@#", "nan", "inf", "NA", "1e400", "\ufeff", "\x00"]
csv_like = st.lists(st.sampled_from(_CSV_ALPHABET), max_size=400).map(lambda parts: "".join(parts).encode("utf-8"))


@SETTINGS
@given(raw=st.one_of(st.binary(max_size=2000), csv_like))
def test_random_bytes_never_crash_a_build(raw: bytes) -> None:
    with _scratch() as tmp:
        rows, _ = _build(Path(tmp), {"random.csv": raw})
        assert "random" in rows
        if rows["random"]["status"] == "error":
            assert "random.csv" in rows["random"]["message"] or "usable row" in rows["random"]["message"]


# --- random valid numeric tables ------------------------------------------------------------------

finite = st.one_of(
    st.integers(-1000, 1000).map(float),
    st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False, width=32).map(float),
)
cell = st.one_of(finite, finite, finite, st.just(math.nan))


@st.composite
def numeric_tables(draw: st.DrawFn) -> tuple[list[str], list[list[float]], bool]:
    ncol = draw(st.integers(2, 4))
    nrow = draw(st.integers(0, 40))
    names = draw(
        st.lists(st.from_regex(r"[a-z][a-z0-9_]{0,7}", fullmatch=True), min_size=ncol, max_size=ncol, unique=True)
    )
    rows = draw(st.lists(st.lists(cell, min_size=ncol, max_size=ncol), min_size=nrow, max_size=nrow))
    with_sidecar = ncol > 2 or draw(st.booleans())
    return names, rows, with_sidecar


def _number(text: str) -> float:
    return float(text) if text != "" else math.nan


@SETTINGS
@given(table=numeric_tables())
def test_random_numeric_tables_give_contract_rows(table: tuple[list[str], list[list[float]], bool]) -> None:
    names, rows, with_sidecar = table
    quoted = [f"Q({n!r})" if n in ("I", "Q", "center", "scale", "standardize") else n for n in names]
    response, predictors = quoted[-1], quoted[:-1]
    text = ",".join(names) + "\n" + "".join(",".join("" if math.isnan(v) else repr(v) for v in r) + "\n" for r in rows)
    files = {"table.csv": text.encode()}
    if with_sidecar:
        model = f"{response} ~ {' + '.join(predictors)}"
        files["table.toml"] = f"model = {json.dumps(model)}\n".encode()
    with _scratch() as tmp:
        summary, site = _build(Path(tmp), files)
        row = summary["table"]
        if row["status"] == "error":
            assert row["message"].strip()
            return
        # The model uses: the last column as response, the others as predictors (the assumed
        # model for two columns is the same: second ~ first), with an intercept.
        values = np.array(rows, dtype=float).reshape(len(rows), len(names))
        complete = np.isfinite(values).all(axis=1)
        n, p = int(complete.sum()), len(names)
        assert int(row["n"]) == n
        assert int(row["df_resid"]) == n - p
        r2 = _number(row["r_squared"])
        assert math.isnan(r2) or -1e-9 <= r2 <= 1 + 1e-9
        folder = site / "datasets" / "table"
        with (folder / "coefficients.csv").open(encoding="utf-8", newline="") as fh:
            coefs = list(csv.DictReader(fh))
        assert [c["term"] for c in coefs] == ["Intercept", *names[:-1]]
        with (folder / "observations.csv").open(encoding="utf-8", newline="") as fh:
            reader = csv.DictReader(fh)
            assert reader.fieldnames is not None
            assert reader.fieldnames[0] == "row"
            used = [int(r["row"]) for r in reader]
        assert used == [i + 1 for i in np.flatnonzero(complete)]
        # Independent computation: numpy's least squares on the complete rows.
        X = np.column_stack([np.ones(n), values[complete, :-1]])
        y = values[complete, -1]
        if np.linalg.cond(X) < 1e6:
            ref, *_ = np.linalg.lstsq(X, y, rcond=None)
            est = np.array([_number(c["estimate"]) for c in coefs])
            scale = max(1.0, float(np.max(np.abs(ref))))
            np.testing.assert_allclose(est, ref, rtol=1e-6, atol=1e-6 * scale)


# --- random sidecars -----------------------------------------------------------------------------

# A dataset the sidecar keys can refer to: x, y, a positive weight w and a group g (invented numbers).
_LINES = CONTROL.read_text(encoding="utf-8").splitlines()[1:]
SIDECAR_DATA = "x,y,w,g\n" + "".join(f"{line},{1 + i % 3},{'ab'[i % 2]}\n" for i, line in enumerate(_LINES))

PLAUSIBLE = st.sampled_from(
    [
        "y ~ x",
        "y ~ x - 1",
        "np.log(y) ~ x",
        "y ~ x + I(x**2)",
        "y ~ z",
        "y ~",
        "y ~ x + g",
        "~ x",
        "x = 1",
        "Intercept = 0",
        "x = 1, Intercept = 0",
        "nonsense = = 2",
        ["x = 1"],
        ["reverse", "deming", "orthogonal", "geometric_mean"],
        ["deming", "bogus"],
        [0.25, 1.7, 40.0],
        [-1e300, 0.0],
        [{"x": 2.0}],
        [{"z": 1.0}],
        [{}],
        [1, "a"],
        0.95,
        0.5,
        0.0,
        1.0,
        -3,
        2,
        1e-300,
        1e300,
        True,
        False,
        "w",
        "g",
        "x",
        "Intercept",
        "zzz",
        ";",
        ",",
        "\t",
        ".",
        "utf-8",
        "latin-1",
        "utf-16",
        "rot13",
        {"x": "mg/L", "y": "<b>AU</b>"},
        {"x": 1},
    ]
)
_text = st.text(st.characters(codec="utf-8"), max_size=20)  # any text TOML can hold (no lone surrogates)
_scalar = st.one_of(st.booleans(), st.integers(-(10**6), 10**6), st.floats(), _text)
RANDOM = st.recursive(
    _scalar,
    lambda inner: st.one_of(st.lists(inner, max_size=4), st.dictionaries(_text, inner, max_size=3)),
    max_leaves=6,
)
sidecars = st.dictionaries(
    st.one_of(st.sampled_from(SIDECAR_KEYS), st.from_regex(r"[a-z_]{1,12}", fullmatch=True)),
    st.one_of(PLAUSIBLE, PLAUSIBLE, RANDOM),
    max_size=6,
)


def _toml(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return "nan" if math.isnan(value) else repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{json.dumps(k)} = {_toml(v)}" for k, v in value.items()) + "}"
    raise TypeError(value)


@SETTINGS
@given(sidecar=sidecars)
def test_random_sidecars_never_crash_a_build(sidecar: dict[str, object]) -> None:
    text = "".join(f"{json.dumps(k)} = {_toml(v)}\n" for k, v in sidecar.items())
    with _scratch() as tmp:
        rows, _ = _build(Path(tmp), {"data.csv": SIDECAR_DATA.encode(), "data.toml": text.encode()})
        assert "data" in rows
        assert rows["data"]["message"] or rows["data"]["status"] == "ok"
