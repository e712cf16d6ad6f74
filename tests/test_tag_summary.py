"""A tag with more datasets than a chart can show is summarised: the extremes drawn, the spread as percentiles,
and a link to the index table filtered by the tag.

Data: 65 subsets of 20 rows of NIST StRD Norris (real data; each subset's slope differs a little).
Independent check of the percentiles: Python's statistics.quantiles with method="inclusive" (the same
definition as numpy's default, Hyndman and Fan's 7, computed by other code).
"""

from __future__ import annotations

import html
import json
import re
import statistics
from pathlib import Path

import numpy as np
from nist_data import load_nist

from sitegen.cli import main
from sitegen.model import from_json
from sitegen.report import fmt
from sitegen.report.tags import EXTREMES, MAX_FOREST_ROWS, tag_blocks

COUNT = 65


def _folder(root: Path) -> Path:
    case = load_nist("Norris")
    header, *lines = case.csv_path.read_text("ascii").splitlines()
    root.mkdir(parents=True)
    rng = np.random.default_rng(18)
    for i in range(COUNT):
        pick = sorted(rng.choice(len(lines), size=20, replace=False).tolist())
        (root / f"part_{i:02d}.csv").write_text("\n".join([header, *(lines[k] for k in pick)]) + "\n", "ascii")
        (root / f"part_{i:02d}.toml").write_text(f'title = "Norris part {i}"\nmodel = "y ~ x"\ntags = ["norris"]\n')
    return root


def test_a_large_tag_is_summarised(tmp_path: Path) -> None:
    assert COUNT > MAX_FOREST_ROWS
    data = _folder(tmp_path / "data")
    site = tmp_path / "site"
    assert main(["build", str(data), "-o", str(site), "-q"]) == 0
    reports = [from_json(p.read_text("utf-8")) for p in sorted((site / "datasets").glob("*/fit.json"))]
    slopes = sorted(r.coefficient("x").estimate for r in reports)  # type: ignore[union-attr]
    assert len(slopes) == COUNT

    (block,) = tag_blocks(reports)
    summary = block["summary"]
    assert summary["count"] == COUNT
    drawn = sorted(row["estimate"] for row in summary["drawn"])
    assert drawn == slopes[:EXTREMES] + slopes[-EXTREMES:]
    cuts = statistics.quantiles(slopes, n=100, method="inclusive")
    expected = [slopes[0], cuts[4], cuts[24], cuts[49], cuts[74], cuts[94], slopes[-1]]
    got = [v for _, v in summary["percentiles"]]
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    assert [name for name, _ in summary["percentiles"]][::3] == ["lowest", "median", "highest"]

    page = (site / "index.html").read_text("utf-8")
    assert 'href="?tag=norris#h-table"' in page
    assert f"Show all {COUNT} in the table of every dataset" in page
    for value in got:
        assert f"<td>{fmt.num(value)}</td>" in page
    # the forest drawn on the index holds the extremes only
    marker = '<script type="application/json" class="vl-spec" data-target="vis-forest-norris">'
    spec_text = re.search(re.escape(marker) + "(.*?)</script>", page, re.S)
    assert spec_text is not None
    spec = json.loads(html.unescape(spec_text.group(1)))
    rows = next(iter(spec["datasets"].values()))
    assert sorted(r["estimate"] for r in rows) == drawn
    # every dataset is still in the index table
    assert page.count('data-tags="norris"') == COUNT


def test_a_small_tag_is_drawn_whole(tmp_path: Path) -> None:
    data = _folder(tmp_path / "data")
    for extra in sorted(data.glob("part_*"))[2 * 5 :]:
        extra.unlink()
    site = tmp_path / "site"
    assert main(["build", str(data), "-o", str(site), "-q"]) == 0
    reports = [from_json(p.read_text("utf-8")) for p in sorted((site / "datasets").glob("*/fit.json"))]
    (block,) = tag_blocks(reports)
    assert block["summary"] is None
    assert "tag-summary" not in (site / "index.html").read_text("utf-8")


def test_datasets_with_the_same_title_get_a_forest_row_each(tmp_path: Path) -> None:
    """Two datasets titled alike in one tag: two rows in the comparison, each labelled with its file."""
    data = tmp_path / "data"
    data.mkdir()
    case = load_nist("Norris")
    header, *lines = case.csv_path.read_text("ascii").splitlines()
    for i, name in enumerate(("first", "second", "third")):
        (data / f"{name}.csv").write_text("\n".join([header, *lines[i * 12 : i * 12 + 20]]) + "\n", "ascii")
        title = "Norris third" if name == "third" else "Norris twin"
        (data / f"{name}.toml").write_text(f'title = "{title}"\nmodel = "y ~ x"\ntags = ["twins"]\n')
    site = tmp_path / "site"
    assert main(["build", str(data), "-o", str(site), "-q"]) == 0
    page = (site / "index.html").read_text("utf-8")
    specs = re.findall(
        r'<script type="application/json" class="vl-spec" data-target="vis-forest-twins">(.*?)</script>', page, re.S
    )
    (spec,) = [json.loads(s) for s in specs]
    headings = [row["heading"] for row in spec["datasets"]["rows"]]
    assert sorted(headings) == ["Norris third", "Norris twin (first.csv)", "Norris twin (second.csv)"]
    assert len({row["dataset"] for row in spec["datasets"]["rows"]}) == 3
    assert html.escape("Norris twin (second.csv)") in page  # the table under the chart says the same
