"""Files read and fitted in chunks (sitegen/stream) against the whole-file path and NIST's certified values.

Every test builds real CSV files in a tmp folder with the real CLI. ``[limits] stream_above_megabytes = 0``
makes every file of the folder read in chunks (or the sidecar's own ``stream_above_megabytes = 0`` one
dataset), and ``stream_chunk_rows`` sets the chunk size.

Checks:

- a synthetic 200,000-row line read in chunks gives every figure of ``fit.json`` and every cell of
  ``observations.csv`` of the whole-file build to 12 significant digits (per-row figures relative to the
  largest magnitude of their column: a residual that happens to be 1e-13 carries the absolute error of the
  others);
- every NIST StRD linear set (tests/data/nist, certified values from NIST/ITL's Statistical Reference
  Datasets, https://www.itl.nist.gov/div898/strd/), fitted in chunks of one row, meets the digits the
  whole-file NIST tests ask for (tests/test_nist_accuracy.py: 9 for coefficients, 7 for standard errors,
  residual SD, R² and F);
- a bad cell in a late chunk fails its dataset with the whole-file reader's message, and the others build;
- a sidecar key the chunked fit does not offer fails its dataset with a message naming the key.
"""

from __future__ import annotations

import codecs
import json
import math
import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from nist_data import ALL_NIST, load_nist

from sitegen.cli import main
from sitegen.stats.repeats import MAX_SETTINGS

DIGITS = 12
#: Breusch–Pagan's LM and RESET's F are small differences of large sums (n·R² with R² near 1e-6 here): the
#: whole-file path forms them as 1 − SSR/TSS and loses about five of long double's 19 digits to that
#: cancellation, the chunked path adds up the explained part directly. They agree to 10 digits. So does the
#: lack-of-fit F, SSR less pure error (pure error summed setting by setting as the chunks come, or in one sum),
#: whose far-tail p-value (1e-79 in the replicated test) carries that difference times |log p|.
DIFFERENCE_DIGITS = 10
_DIFFERENCES = ("constant_variance", "curvature", "lack_of_fit")


def _write_line(path: Path, n: int, seed: int = 7) -> None:
    rng = np.random.default_rng(seed)
    x = rng.uniform(0.0, 50.0, n)
    y = 3.0 + 0.8 * x + rng.normal(0.0, 2.0, n)
    y[n // 3] += 40.0  # one far point, so that flags and the influence check have something to say
    pd.DataFrame({"x": x, "y": y}).to_csv(path, index=False)


def _build(data: Path, out: Path) -> int:
    return main(["build", str(data), "-o", str(out), "-j", "1", "-q"])


def _fit(out: Path, slug: str) -> dict[str, Any]:
    loaded: dict[str, Any] = json.loads((out / "datasets" / slug / "fit.json").read_text(encoding="utf-8"))
    return loaded


def _digits_apart(a: float, b: float) -> float:
    if a == b:
        return math.inf
    return -math.log10(abs(a - b) / max(abs(a), abs(b)))


CHECKS = ("constant_variance", "independence", "normality", "curvature", "lack_of_fit", "collinearity", "influence")


def _compare(whole: Any, chunked: Any, path: str, found: list[str]) -> None:
    """Every number of ``whole`` equals ``chunked``'s to DIGITS significant digits (the fields the chunked
    fit adds, and the texts of checks it computes differently, aside)."""
    if isinstance(whole, dict):
        for key, value in whole.items():
            if key in ("chunked", "basis", "messages"):
                continue
            _compare(value, chunked[key], f"{path}.{key}", found)
    elif isinstance(whole, list):
        if len(whole) != len(chunked):
            found.append(f"{path}: {len(whole)} entries, chunked {len(chunked)}")
            return
        for i, (a, b) in enumerate(zip(whole, chunked, strict=True)):
            _compare(a, b, f"{path}[{i}]", found)
    elif isinstance(whole, float) and isinstance(chunked, int | float):
        wanted = DIFFERENCE_DIGITS if any(f"[{CHECKS.index(c)}]" in path for c in _DIFFERENCES) else DIGITS
        if "diagnostics" not in path:
            wanted = DIGITS
        if _digits_apart(whole, float(chunked)) < wanted:
            found.append(f"{path}: {whole!r} vs {chunked!r}")
    elif whole != chunked and not path.endswith(".text"):
        found.append(f"{path}: {whole!r} vs {chunked!r}")


def _built_both_ways(tmp_path: Path, write: Callable[[Path], None], slug: str, chunk_rows: int) -> tuple[Any, Any]:
    """The fit.json of ``slug`` (its CSV made by ``write``, model y ~ x) built whole into tmp_path/a and read in
    chunks of ``chunk_rows`` into tmp_path/b."""
    whole, chunked = tmp_path / "whole", tmp_path / "chunked"
    whole.mkdir()
    chunked.mkdir()
    write(whole / f"{slug}.csv")
    shutil.copyfile(whole / f"{slug}.csv", chunked / f"{slug}.csv")
    for folder in (whole, chunked):
        (folder / f"{slug}.toml").write_text('model = "y ~ x"\n', encoding="utf-8")
    limits = f"[limits]\nstream_above_megabytes = 0\nstream_chunk_rows = {chunk_rows}\n"
    (chunked / "site.toml").write_text(limits, encoding="utf-8")
    assert _build(whole, tmp_path / "a") in (0, 1)
    assert _build(chunked, tmp_path / "b") in (0, 1)
    return _fit(tmp_path / "a", slug), _fit(tmp_path / "b", slug)


def test_chunked_fit_equals_whole_file_fit(tmp_path: Path) -> None:
    a, b = _built_both_ways(tmp_path, lambda path: _write_line(path, 200_000), "line", 30_000)
    assert a["chunked"] is None
    assert b["chunked"]["chunks"] == 7
    assert b["chunked"]["passes"] == 2
    assert b["status"] != "error", b["messages"]
    found: list[str] = []
    _compare(a, b, "fit", found)
    # 200,000 distinct settings are more than a chunked fit keeps for the lack-of-fit test, and it says so;
    # the other checks say they used every row
    bases = {d["check"]: d["basis"] for d in b["diagnostics"]}
    assert bases.pop("lack_of_fit") == "not computed"
    assert set(bases.values()) == {"streamed"}, bases
    lack = next(d for d in b["diagnostics"] if d["check"] == "lack_of_fit")
    texts = [d["text"] for d in a["diagnostics"] if d["check"] != "lack_of_fit"]
    assert [d["text"] for d in b["diagnostics"] if d["check"] != "lack_of_fit"] == texts
    assert f"more than {MAX_SETTINGS:,} distinct predictor settings" in lack["text"]
    assert [d["check"] for d in b["diagnostics"]] == list(CHECKS)
    assert not found, "\n".join(found[:20])
    obs_a = pd.read_csv(tmp_path / "a" / "datasets" / "line" / "observations.csv")
    obs_b = pd.read_csv(tmp_path / "b" / "datasets" / "line" / "observations.csv")
    assert list(obs_a.columns) == list(obs_b.columns)
    assert len(obs_a) == len(obs_b) == 200_000
    for col in obs_a.columns:
        if obs_a[col].dtype.kind == "f":
            x, y = obs_a[col].to_numpy(), obs_b[col].to_numpy()
            scale = float(np.nanmax(np.abs(x)))
            assert np.array_equal(np.isnan(x), np.isnan(y)), col
            assert float(np.nanmax(np.abs(x - y))) <= 10.0**-DIGITS * scale, col
        else:
            assert obs_a[col].fillna("").tolist() == obs_b[col].fillna("").tolist(), col


def _write_replicated(path: Path, seed: int = 11) -> None:
    """Ten central settings measured 5,000 times each, two end settings 300 times (high leverage, repeated), three
    far single rows, and a bend."""
    rng = np.random.default_rng(seed)
    x = np.concatenate([np.repeat(np.arange(15.0, 25.0), 5000), np.repeat([0.0, 39.0], 300), [60.0, 70.0, 80.0]])
    rng.shuffle(x)
    y = 2.0 + 0.5 * x + 0.002 * (x - 20.0) ** 2 + rng.normal(0.0, 1.0, len(x))
    pd.DataFrame({"x": x, "y": y}).to_csv(path, index=False)


def test_chunked_lack_of_fit_and_designed_rows_equal_whole_file(tmp_path: Path) -> None:
    """Rows grouped by setting as the chunks are read (sitegen/stats/repeats.py) give the whole-file test of
    lack of fit, and the rows of repeated settings are not flagged for their leverage alone, as read whole."""
    a, b = _built_both_ways(tmp_path, _write_replicated, "runs", 7000)
    assert b["chunked"]["chunks"] == 8
    lack_a, lack_b = (next(d for d in f["diagnostics"] if d["check"] == "lack_of_fit") for f in (a, b))
    assert lack_b["basis"] == "streamed"
    assert lack_a["flag"]  # the bend is found both ways
    assert lack_b["flag"]
    assert "15 distinct settings" in lack_b["text"]
    assert lack_b["text"] == lack_a["text"]
    assert _digits_apart(lack_a["statistic"], lack_b["statistic"]) >= DIGITS
    # the chart's points (residuals near zero among them) to DIGITS relative to their column's largest value
    points_a, points_b = (np.array(f["chart"].pop("points"), dtype=float) for f in (a, b))
    scale = np.nanmax(np.abs(points_a), axis=0)
    assert np.all(np.abs(points_a - points_b) <= 10.0**-DIGITS * scale)
    found: list[str] = []
    _compare(a, b, "fit", found)
    assert not found, "\n".join(found[:20])
    obs = pd.read_csv(tmp_path / "a" / "datasets" / "runs" / "observations.csv")
    flags_a = obs["flags"].fillna("")
    flags_b = pd.read_csv(tmp_path / "b" / "datasets" / "runs" / "observations.csv")["flags"].fillna("")
    assert flags_b.tolist() == flags_a.tolist()
    # Repeated settings with leverage above 2p/n (the lowest ones) are not flagged for it; the far single rows are.
    far = obs["x"] >= 60
    high = obs["leverage"] > 2 * 2 / len(obs)
    assert int((high & ~far).sum()) == 600
    assert flags_a[far].str.contains("leverage above 2p/n").all()
    repeated_flagged = flags_a[~far & (flags_a != "")]
    assert repeated_flagged.str.contains("studentized|Cook", regex=True).all()


def _lre(got: float | None, certified: float) -> float:
    if got is None or not math.isfinite(got):
        return 0.0
    if got == certified:
        return 15.0
    return min(15.0, -math.log10(abs(got - certified) / abs(certified)))


@pytest.fixture(scope="module")
def nist_chunked(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Every NIST set in one folder, read in chunks of one row."""
    root = tmp_path_factory.mktemp("nist-chunked")
    data = root / "data"
    data.mkdir()
    for name in ALL_NIST:
        case = load_nist(name)
        shutil.copyfile(case.csv_path, data / f"{name}.csv")
        (data / f"{name}.toml").write_text(f'model = "{case.formula}"\n', encoding="utf-8")
    (data / "site.toml").write_text("[limits]\nstream_above_megabytes = 0\nstream_chunk_rows = 1\n")
    assert _build(data, root / "site") in (0, 1)
    return root / "site"


@pytest.mark.parametrize("name", ALL_NIST)
def test_nist_in_chunks_of_one_row_meets_certified_values(nist_chunked: Path, name: str) -> None:
    # Source: NIST StRD certified values of this set (tests/data/nist/certified.json).
    case = load_nist(name)
    fit = _fit(nist_chunked, name.lower())
    assert fit["status"] != "error", fit["messages"]
    assert fit["chunked"]["chunk_rows"] == 1
    assert fit["chunked"]["chunks"] == fit["n"]
    assert fit["df_resid"] == case.df_residual
    for c, cert in zip(fit["coefficients"], case.coefficients, strict=True):
        assert _lre(c["estimate"], cert) >= 9.0, (name, c["term"], c["estimate"], cert)
    y = pd.read_csv(case.csv_path)["y"].to_numpy(dtype=float)
    rms = float(np.sqrt(np.mean(y * y)))
    for i, (c, cert) in enumerate(zip(fit["coefficients"], case.std_errors, strict=True)):
        if cert == 0.0:  # the exact fits Wampler1/2: |SE| ≤ 1e-9 × the coefficient's size
            assert abs(c["std_error"]) <= 1e-9 * abs(case.coefficients[i]), (name, c)
        else:
            assert _lre(c["std_error"], cert) >= 7.0, (name, c["term"], c["std_error"], cert)
    if case.residual_sd == 0.0:
        assert abs(fit["residual_std_error"]) <= 1e-9 * rms
    else:
        assert _lre(fit["residual_std_error"], case.residual_sd) >= 7.0, (name, fit["residual_std_error"])
    assert _lre(fit["r_squared"], case.r_squared) >= 7.0, (name, fit["r_squared"])
    if case.f_statistic is not None:
        assert _lre(fit["f_stat"], case.f_statistic) >= 7.0, (name, fit["f_stat"])


def test_bad_cell_in_a_late_chunk_fails_only_its_dataset(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    _write_line(data / "good.csv", 5_000)
    _write_line(data / "bad.csv", 5_000)
    lines = (data / "bad.csv").read_text(encoding="utf-8").splitlines()
    lines[4_321] = lines[4_321].split(",")[0] + ",12.5x"  # data row 4,321, in the ninth chunk of 500
    (data / "bad.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (data / "site.toml").write_text("[limits]\nstream_above_megabytes = 0\nstream_chunk_rows = 500\n")
    assert _build(data, tmp_path / "site") == 1
    bad, good = _fit(tmp_path / "site", "bad"), _fit(tmp_path / "site", "good")
    assert good["status"] != "error"
    assert good["chunked"] is not None
    assert bad["status"] == "error"
    text = bad["messages"][-1]["text"]
    assert "column 'y' has text where a number is expected ('12.5x' on row 4321)" in text
    assert not (tmp_path / "site" / "datasets" / "bad" / "observations.csv").exists()
    (data / "site.toml").unlink()  # read whole: the same message
    assert _build(data, tmp_path / "whole") == 1
    assert _fit(tmp_path / "whole", "bad")["messages"][-1]["text"] == text


def test_keys_a_chunked_fit_does_not_offer_are_named(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    _write_line(data / "w.csv", 300)
    (data / "w.toml").write_text('model = "y ~ x"\nstream_above_megabytes = 0\nrobust = true\nlines = ["deming"]\n')
    _write_line(data / "plain.csv", 300)
    assert _build(data, tmp_path / "site") == 1
    fit = _fit(tmp_path / "site", "w")
    assert fit["status"] == "error"
    text = fit["messages"][-1]["text"]
    assert "read in chunks" in text
    assert "'lines'" in text
    assert "'robust'" in text
    assert _fit(tmp_path / "site", "plain")["chunked"] is None  # the site's threshold: read whole


def test_chunked_checks_meet_an_extended_precision_reference(tmp_path: Path) -> None:
    # Reference: Breusch–Pagan (Koenker's n·R² of e² on [1, x]) and RESET (squared and cubed centred fitted
    # values) by their textbook formulas in mpmath at 40 digits, independent of sitegen's solver. Both are
    # small differences of large sums; the chunked path adds up the explained part directly.
    mp = pytest.importorskip("mpmath")
    mp.mp.dps = 40
    data = tmp_path / "data"
    data.mkdir()
    _write_line(data / "line.csv", 8_000, seed=3)
    (data / "line.toml").write_text('model = "y ~ x"\nstream_above_megabytes = 0\n', encoding="utf-8")
    (data / "site.toml").write_text("[limits]\nstream_chunk_rows = 700\n", encoding="utf-8")
    assert _build(data, tmp_path / "site") in (0, 1)
    checks = {d["check"]: d for d in _fit(tmp_path / "site", "line")["diagnostics"]}
    frame = pd.read_csv(data / "line.csv")
    x = [mp.mpf(float(v)) for v in frame["x"]]
    y = [mp.mpf(float(v)) for v in frame["y"]]
    n = len(x)
    one = [mp.mpf(1)] * n

    def residuals(cols: list[list[Any]], target: list[Any]) -> list[Any]:
        k = len(cols)
        gram = mp.matrix(k, k)
        rhs = mp.matrix(k, 1)
        for i in range(k):
            for j in range(k):
                gram[i, j] = mp.fsum(u * v for u, v in zip(cols[i], cols[j], strict=True))
            rhs[i] = mp.fsum(u * v for u, v in zip(cols[i], target, strict=True))
        beta = mp.lu_solve(gram, rhs)
        return [t - mp.fsum(beta[j] * cols[j][i] for j in range(k)) for i, t in enumerate(target)]

    e = residuals([one, x], y)
    ssr = mp.fsum(v * v for v in e)
    u = [v * v for v in e]
    mean_u = mp.fsum(u) / n
    ru = residuals([one, x], u)
    lm = n * (1 - mp.fsum(v * v for v in ru) / mp.fsum((v - mean_u) ** 2 for v in u))
    fitted = [a - b for a, b in zip(y, e, strict=True)]
    mean_f = mp.fsum(fitted) / n
    z = [v - mean_f for v in fitted]
    rest = mp.fsum(v * v for v in residuals([one, x, [v**2 for v in z], [v**3 for v in z]], y))
    f_reset = ((ssr - rest) / 2) / (rest / (n - 4))
    for check, ref in (("constant_variance", lm), ("curvature", f_reset)):
        got = checks[check]["statistic"]
        assert abs(got - ref) <= 1e-13 * abs(ref), (check, got, mp.nstr(ref, 17))


def test_the_threshold_keys_are_checked(tmp_path: Path, run_cli: Any) -> None:
    data = tmp_path / "data"
    data.mkdir()
    _write_line(data / "a.csv", 50)
    (data / "site.toml").write_text("[limits]\nstream_above_megabytes = -1\n", encoding="utf-8")
    result = run_cli("build", data, "-o", tmp_path / "site", "-q")
    assert result.code != 0
    assert "[limits] key 'stream_above_megabytes' must be a number of megabytes, 0 or more" in result.output
    (data / "site.toml").unlink()
    (data / "a.toml").write_text('model = "y ~ x"\nstream_above_megabytes = "big"\n', encoding="utf-8")
    assert run_cli("build", data, "-o", tmp_path / "site", "-q").code == 1
    fit = _fit(tmp_path / "site", "a")
    assert fit["status"] == "error"
    assert "key 'stream_above_megabytes' must be a finite number" in fit["messages"][-1]["text"]


def test_which_files_are_read_in_chunks() -> None:
    """The built-in threshold reads large plain fits in chunks; a sidecar asking for what only the whole-file fit
    offers keeps a file below the former threshold (200 MB) whole; a threshold that was chosen is obeyed."""
    from sitegen.analyze import reads_in_chunks
    from sitegen.spec import STREAM_ABOVE_MEGABYTES, WHOLE_WITH_KEYS_BELOW_MEGABYTES, DatasetSpec, Limits

    mb = 1_000_000
    plain, weighted = DatasetSpec(), DatasetSpec(weights="w")
    assert STREAM_ABOVE_MEGABYTES < WHOLE_WITH_KEYS_BELOW_MEGABYTES
    below, between = int(STREAM_ABOVE_MEGABYTES * mb) - 1, int(STREAM_ABOVE_MEGABYTES * mb)
    above = int(WHOLE_WITH_KEYS_BELOW_MEGABYTES * mb)
    site = Limits()
    assert not reads_in_chunks(below, plain, site)
    assert reads_in_chunks(between, plain, site)
    assert not reads_in_chunks(between, weighted, site)  # read whole, as before the threshold was lowered
    assert reads_in_chunks(above, weighted, site)  # refused with the keys named, as before
    chosen = Limits(stream_above_megabytes=1.0)
    assert reads_in_chunks(mb, weighted, chosen)  # the site chose it: the keys are refused by name
    assert not reads_in_chunks(mb - 1, plain, chosen)
    own = DatasetSpec(weights="w", stream_above_megabytes=0.0)
    assert reads_in_chunks(10, own, site)
    assert not reads_in_chunks(above, DatasetSpec(stream_above_megabytes=1e4), site)
    # UTF-16/UTF-32 text, which only the whole-file reader converts, is read whole below 200 MB too
    assert not reads_in_chunks(between, plain, site, wide=True)
    assert reads_in_chunks(above, plain, site, wide=True)  # refused with a message saying how to save it


def test_utf16_text_is_told_from_its_start() -> None:
    from sitegen.load import looks_wide

    text = "x,y\n1.5,2.5\n" * 100
    assert looks_wide(codecs.BOM_UTF16_LE + text.encode("utf-16-le"), "utf-8")
    assert looks_wide(text.encode("utf-16-be"), "utf-8")  # no byte-order mark: the pattern of zero bytes
    assert looks_wide(text.encode("utf-32"), "utf-8")
    assert looks_wide(text.encode("ascii"), "utf-16")  # the sidecar says so
    assert not looks_wide(text.encode("utf-8"), "utf-8")
    assert not looks_wide(text.encode("latin-1"), "latin-1")
    assert not looks_wide(text.encode("utf-8"), "no-such-encoding")  # the reader reports it


def test_a_utf16_file_above_the_threshold_is_read_whole_by_default(tmp_path: Path) -> None:
    from sitegen.spec import STREAM_ABOVE_MEGABYTES

    data = tmp_path / "data"
    data.mkdir()
    rng = np.random.default_rng(4)
    n = int(STREAM_ABOVE_MEGABYTES * 1e6 / 30)  # at least 17 characters a row, two bytes each
    x = rng.uniform(0.0, 10.0, n)
    lines = "".join(f"{a:.6f},{2 + 3 * a + b:.6f}\n" for a, b in zip(x, rng.normal(0, 1, n), strict=True))
    (data / "wide.csv").write_bytes(codecs.BOM_UTF16_LE + ("x,y\n" + lines).encode("utf-16-le"))
    assert (data / "wide.csv").stat().st_size >= STREAM_ABOVE_MEGABYTES * 1e6
    (data / "site.toml").write_text(f"[limits]\nmax_rows = {n}\n", encoding="utf-8")
    assert _build(data, tmp_path / "site") in (0, 1)
    fit = _fit(tmp_path / "site", "wide")
    assert fit["status"] != "error", fit["messages"]
    assert fit["chunked"] is None
    assert fit["n"] == n
    assert any("is UTF-16 text" in m["text"] for m in fit["messages"])


def test_a_centred_model_is_read_whole_below_the_former_threshold_and_refused_when_chosen(tmp_path: Path) -> None:
    """Centred terms need every row at once (their mean): with the built-in threshold a file under 200 MB is
    read whole for them (found in its first chunk); with a threshold chosen in site.toml the dataset says why
    not."""
    from sitegen.spec import STREAM_ABOVE_MEGABYTES

    data = tmp_path / "data"
    data.mkdir()
    rng = np.random.default_rng(9)
    n = int(STREAM_ABOVE_MEGABYTES * 1e6 / 17)  # at least 18 bytes a row
    x = rng.uniform(0.0, 10.0, n)
    y = 1.0 + 2.0 * x + 0.1 * x**2 + rng.normal(0.0, 0.5, n)
    frame = pd.DataFrame({"x": x.round(6), "y": y.round(6)})
    frame.to_csv(data / "lots.csv", index=False)
    assert (data / "lots.csv").stat().st_size >= STREAM_ABOVE_MEGABYTES * 1e6
    (data / "lots.toml").write_text('model = "y ~ center(x) + I(center(x)**2)"\n', encoding="utf-8")
    (data / "site.toml").write_text(f"[limits]\nmax_rows = {n}\n", encoding="utf-8")
    assert _build(data, tmp_path / "site") in (0, 1)
    fit = _fit(tmp_path / "site", "lots")
    assert fit["status"] != "error", fit["messages"]
    assert fit["chunked"] is None
    assert len(fit["terms"]) == 3
    (data / "site.toml").write_text(f"[limits]\nmax_rows = {n}\nstream_above_megabytes = 5\n", encoding="utf-8")
    assert _build(data, tmp_path / "site2") == 1
    fit = _fit(tmp_path / "site2", "lots")
    assert fit["status"] == "error"
    assert "categorical or centred terms, which need every row at once" in fit["messages"][-1]["text"]
