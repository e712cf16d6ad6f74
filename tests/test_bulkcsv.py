"""The fast writer of large observation tables writes the same bytes as the contract's writer.

References: the Python csv module through ``rows_to_csv_bytes`` (the writer of every table up to
XLSX_MAX_ROWS rows, whose bytes the contract describes), pandas' ``to_csv`` (sitegen's large-table writer
before), and ``repr`` of each float (Python's shortest round-trip spelling, the contract's). Data: NIST StRD
linear-regression sets and textbook sets (tests/data), fitted through sitegen's own pipeline.
Per-row values checked independently: the flags from the documented rules of thumb (common practice), the
the sampled chart's points against the observations file.
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np
import pytest
from conftest import ROOT
from nist_data import ALL_NIST, load_nist
from scipy import stats as scipy_stats

from sitegen.analyze import DatasetResult, FitTask, analyze
from sitegen.cli import main
from sitegen.derive import MAX_CHART_POINTS
from sitegen.discover import discover
from sitegen.report import bulkcsv
from sitegen.report.files import XLSX_MAX_ROWS
from sitegen.report.tables import clean_rows, rows_from_columns, rows_to_csv_bytes, write_large_csv
from sitegen.spec import Limits

TEXTBOOK = ROOT / "tests" / "data" / "textbook"


def fitted(folder: Path, name: str, csv_text: str, sidecar: str) -> DatasetResult:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / f"{name}.csv").write_text(csv_text, encoding="utf-8")
    (folder / f"{name}.toml").write_text(sidecar, encoding="utf-8")
    (source,) = discover(folder)
    return analyze(FitTask(source=source, defaults=(), limits=Limits()))


def reference_bytes(columns: tuple[str, ...], values: tuple[np.ndarray, ...]) -> bytes:
    header, _ = clean_rows(columns, [])
    return rows_to_csv_bytes(header, rows_from_columns(values))


def bulk_bytes(tmp_path: Path, columns: tuple[str, ...], values: tuple[np.ndarray, ...]) -> bytes:
    assert bulkcsv.can_write(values)
    out = tmp_path / "bulk.csv"
    bulkcsv.write_csv(columns, values, out)
    return out.read_bytes()


def real_results(tmp_path: Path) -> list[tuple[str, DatasetResult]]:
    out = []
    for name in ALL_NIST:
        case = load_nist(name)
        out.append(
            (name, fitted(tmp_path / name, name, case.csv_path.read_text("ascii"), f'model = "{case.formula}"\n'))
        )
    models = {
        "anscombe_quartet": 'model = "y4 ~ x4"\n',
        "forbes_boiling_point": 'model = "lpres ~ bp"\n',
        "fluorescence_calibration": 'model = "intensity ~ concentration"\n',
    }
    for name, sidecar in models.items():
        text = (TEXTBOOK / f"{name}.csv").read_text("utf-8")
        out.append((name, fitted(tmp_path / name, name, text, sidecar)))
    return out


def test_real_observations_equal_the_csv_module_and_pandas(tmp_path: Path) -> None:
    results = real_results(tmp_path)
    assert len(results) == len(ALL_NIST) + 3
    for name, result in results:
        obs = result.observations
        assert obs is not None, name
        got = bulk_bytes(tmp_path, obs.columns, obs.values)
        assert got == reference_bytes(obs.columns, obs.values), name
        write_large_csv(obs.columns, obs.values, tmp_path / "pandas.csv")
        assert got == (tmp_path / "pandas.csv").read_bytes(), name


def _awkward_floats(n: int) -> list[np.ndarray]:
    rng = np.random.default_rng(18)
    with np.errstate(over="ignore"):
        wide = rng.uniform(-10, 10, n) * 10.0 ** rng.integers(-330, 310, n)
    edges = []
    for k in range(-12, 20):
        p = 10.0**k
        edges += [p, -p, np.nextafter(p, 0), np.nextafter(p, np.inf), 1.5 * p, 3 * p]
    edges += [0.0, -0.0, math.nan, math.inf, -math.inf, 5e-324, 2.2250738585072014e-308, 1.7976931348623157e308]
    edge = np.resize(np.array(edges), n)
    integral = np.round(rng.normal(size=n) * 1e6) * 10.0 ** rng.integers(-3, 12, n)
    tiny = rng.exponential(size=n) * 10.0 ** rng.integers(-9, -3, n)  # leverage and Cook's distance at 10⁴–10⁹ rows
    return [wide, edge, integral, tiny]


def test_awkward_values_equal_repr_and_the_csv_module(tmp_path: Path) -> None:
    n = bulkcsv.CHUNK_ROWS + 1234  # two chunks
    floats = _awkward_floats(n)
    ints = np.random.default_rng(5).integers(-(10**15), 10**15, n)
    words = ["", "=a", "a,b", 'q"x', "line\nbreak", "cr\rx", "-3", "plain", "@x", "\uff1dz", "µ ± 2"]
    text = np.array([words[i % len(words)] for i in range(n)], dtype=object)
    columns = ("a", "=b", "c", "d", "e,f", 'g"', "h")
    values = (*floats, ints, text)
    got = bulk_bytes(tmp_path, columns, values)
    assert got == reference_bytes(columns, values)
    rows = list(csv.reader(io.StringIO(got.decode("utf-8"))))
    assert len(rows) == n + 1
    for j, col in enumerate(floats):
        for i in range(0, n, 97):  # every cell a float's repr, or empty when not finite
            v = float(col[i])
            assert rows[i + 1][j] == (repr(v) if math.isfinite(v) else ""), (j, v)


@pytest.mark.parametrize(
    "values",
    [
        (np.array([1.0, math.nan, 2.0]),),  # one column: a lone empty cell is written as ""
        (np.array(["", "a"], dtype=object),),
        (np.array([], dtype=float), np.array([], dtype=object)),
    ],
)
def test_edge_tables(tmp_path: Path, values: tuple[np.ndarray, ...]) -> None:
    columns = tuple(f"c{i}" for i in range(len(values)))
    assert bulk_bytes(tmp_path, columns, values) == reference_bytes(columns, values)


def test_columns_the_writer_leaves_to_pandas() -> None:
    assert not bulkcsv.can_write((np.array([True, False]),))
    assert not bulkcsv.can_write((np.array(["a", 1], dtype=object),))
    assert not bulkcsv.can_write((np.ones(2, dtype=np.longdouble),))


def _designed(obs_cols: dict[str, np.ndarray], response: str) -> list[bool]:
    """Rows at a predictor setting that occurs more than once (the model's columns besides the response)."""
    names = list(obs_cols)
    predictors = [c for c in names[1 : names.index("fitted")] if c not in (response, "weight")]
    settings = [tuple(float(obs_cols[c][i]) for c in predictors) for i in range(len(obs_cols["fitted"]))]
    return [settings.count(s) > 1 for s in settings]


def _expected_flags(obs_cols: dict[str, np.ndarray], p: int, designed: list[bool]) -> list[str]:
    """The reasons by the documented rules of thumb (common practice), worked out row by row. A row at a
    designed setting is listed only with a large residual, leverage 1 or Cook's distance above the median of
    F(p, n − p) (scipy's F quantile, an independent source); otherwise it has no reason at all."""
    n = len(obs_cols["leverage"])
    strong = float(scipy_stats.f.ppf(0.5, p, n - p)) if n > p else math.inf
    out = []
    for h, t, d, f, fixed in zip(
        obs_cols["leverage"], obs_cols["studentized_residual"], obs_cols["cooks_distance"], obs_cols["dffits"],
        designed, strict=True,
    ):  # fmt: skip
        if fixed and not (abs(t) > 3 or h > 1 - 1e-10 or d > strong):
            out.append("")
            continue
        reasons = []
        if h > 1 - 1e-10:
            reasons.append("alone sets a coefficient (leverage 1)")
        elif h > 2 * p / n:
            reasons.append("leverage above 2p/n")
        if abs(t) > 3:
            reasons.append("|studentized residual| above 3")
        if d > 4 / n:
            reasons.append("Cook's distance above 4/n")
        if abs(f) > 2 * math.sqrt(p / n):
            reasons.append("|DFFITS| above 2√(p/n)")
        out.append("; ".join(reasons))
    return out


def test_flags_column_follows_the_rules_of_thumb(tmp_path: Path) -> None:
    seen: set[str] = set()
    for name, result in real_results(tmp_path):
        obs = result.observations
        assert obs is not None
        cols = dict(zip(obs.columns, obs.values, strict=True))
        p = len(result.report.coefficients)
        expected = _expected_flags(cols, p, _designed(cols, result.report.response))
        assert cols["flags"].tolist() == expected, name
        seen |= set(expected)
    assert "alone sets a coefficient (leverage 1)" in seen  # Anscombe's fourth set: one x differs
    assert any("Cook's distance above 4/n" in s for s in seen)


def test_sampled_chart_points_match_the_observations(tmp_path: Path) -> None:
    # Filip's 82 rows (NIST StRD) repeated to pass MAX_CHART_POINTS, so the chart draws a sample and only the
    # drawn rows' figures are computed: each must be that row's figure in observations.csv.
    case = load_nist("Filip")
    lines = case.csv_path.read_text("ascii").splitlines()
    reps = MAX_CHART_POINTS // (len(lines) - 1) + 2
    text = "\n".join([lines[0], *(lines[1:] * reps)]) + "\n"
    result = fitted(tmp_path / "f", "Filip", text, 'model = "y ~ x"\n')
    chart = result.report.chart
    assert chart is not None
    assert chart.sampled
    obs = result.observations
    assert obs is not None
    cols = dict(zip(obs.columns, obs.values, strict=True))
    # standardized residual from the studentized one by the documented relation r = t √(df / (df − 1 + t²))
    # (common practice; from memory: Belsley, Kuh & Welsch, Regression Diagnostics)
    df = result.report.df_resid
    assert df is not None
    t = np.asarray(cols["studentized_residual"], dtype=float)
    std = t * np.sqrt(df / (df - 1 + t**2))
    at = {int(r): i for i, r in enumerate(cols["row"].tolist())}
    names = chart.point_columns
    assert len(chart.points) >= 2000
    for point in chart.points:
        row = dict(zip(names, point, strict=True))
        i = at[int(row["row"] or 0)]
        assert row["std_resid"] == pytest.approx(std[i], rel=1e-8)
        for mine, theirs in (("fitted", "fitted"), ("leverage", "leverage"), ("cooks", "cooks_distance"), ("x", "x")):
            assert row[mine] == cols[theirs][i], mine


def test_a_large_dataset_through_the_cli_writes_the_reference_bytes(tmp_path: Path) -> None:
    # Norris (NIST StRD) repeated past XLSX_MAX_ROWS: the build takes the fast writer; its file must be the
    # bytes the csv module writes for the same observations.
    case = load_nist("Norris")
    lines = case.csv_path.read_text("ascii").splitlines()
    reps = XLSX_MAX_ROWS // (len(lines) - 1) + 1
    text = "\n".join([lines[0], *(lines[1:] * reps)]) + "\n"
    data = tmp_path / "data"
    result = fitted(data, "norris", text, 'model = "y ~ x"\n')
    obs = result.observations
    assert obs is not None
    assert len(obs.values[0]) > XLSX_MAX_ROWS
    assert main(["build", str(data), "-o", str(tmp_path / "site"), "-q"]) == 0
    written = (tmp_path / "site" / "datasets" / "norris" / "observations.csv").read_bytes()
    assert written == reference_bytes(obs.columns, obs.values)
