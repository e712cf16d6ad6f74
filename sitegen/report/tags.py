"""Comparisons across datasets that share a tag: a forest plot and a test of one common value."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from sitegen.model import FitReport
from sitegen.report import charts, fmt


def tag_blocks(reports: Sequence[FitReport]) -> list[dict[str, Any]]:
    """One block per tag: its datasets, a forest chart of the compared term and Cochran's Q."""
    from sitegen.stats.compare import homogeneity  # noqa: PLC0415 - numpy: only a site with tags needs it

    by_tag: dict[str, list[FitReport]] = {}
    for r in reports:
        for t in r.tags:
            by_tag.setdefault(t, []).append(r)
    blocks = []
    for tag, members in sorted(by_tag.items()):
        rows: list[dict[str, Any]] = []
        left_out = [r.title for r in members if r.pooled_contrast]
        label = _labels(members)
        for r in members:
            usable = r.compare_term and r.status != "error" and not r.pooled_contrast
            c = r.coefficient(r.compare_term) if usable and r.compare_term else None
            if c is not None:
                rows.append(
                    {
                        "dataset": r.dataset,
                        "label": label[r.dataset],
                        "estimate": c.estimate,
                        "low": c.ci_low,
                        "high": c.ci_high,
                        "status": r.status,
                        "term": c.term,
                        "se": c.std_error,
                    }
                )
        terms = sorted({row["term"] for row in rows})
        summary = _summary(rows, len(terms) == 1)
        drawn = rows if summary is None else summary["drawn"]
        forest = (
            charts.forest_chart(drawn, terms[0] if len(terms) == 1 else "estimate of each dataset's term")
            if drawn and len(rows) >= 2  # one dataset has nothing to be compared with; its page shows its interval
            else None
        )
        test = ""
        if len(rows) >= 2 and len(terms) == 1:
            h = homogeneity([r["estimate"] for r in rows], [r["se"] for r in rows])
            if h is not None:
                verdict = (
                    "The estimates differ by more than their standard errors allow"
                    if h.p_value < 0.05
                    else "One common value is consistent with these estimates"
                )
                test = (
                    f"{verdict} (Cochran's Q = {fmt.num(h.q)} on {h.df} df, {fmt.p_phrase(h.p_value)}; "
                    f"pooled estimate {fmt.num(h.pooled)}, standard error {fmt.num(h.pooled_se)}). "
                    "The test treats each dataset's standard error as known and is tested at the 5% level."
                )
        elif len(rows) >= 2:
            test = (
                "These datasets estimate different terms (" + ", ".join(terms) + "), so no common value is "
                "tested; set compare in the sidecars to the same term to compare them."
            )
        sets = "dataset" if len(rows) == 1 else "datasets"
        caption = f"Estimates with intervals for the {len(rows)} {sets} tagged {tag}" + (
            f" (term {terms[0]})." if len(terms) == 1 else "."
        )
        if left_out:
            test = (
                f"{test} Left out: {', '.join(left_out)} — its groups have different slopes, so its pooled line is "
                "not a value to compare."
            ).strip()
        if summary is not None:
            caption = (
                f"The {EXTREMES} lowest and {EXTREMES} highest of the {len(rows)} estimates tagged {tag}"
                + (f" (term {terms[0]})." if len(terms) == 1 else ".")
                if drawn
                else ""
            )
        blocks.append(
            {"name": tag, "reports": members, "forest": forest, "caption": caption, "test": test, "summary": summary}
        )
    return blocks


def _labels(members: Sequence[FitReport]) -> dict[str, str]:
    """Each dataset's label in a tag's comparison, by its slug: its title, followed by its file where another
    dataset of the tag has the same title (the chart draws one row per label, so two datasets must never share
    one)."""
    seen: dict[str, int] = {}
    for r in members:
        seen[r.title] = seen.get(r.title, 0) + 1
    return {r.dataset: f"{r.title} ({r.source})" if seen[r.title] > 1 else r.title for r in members}


#: A tag with more estimates than this is summarised rather than drawn row by row (a forest of 5,000 rows is
#: 250,000 px tall and slows the index down to seconds).
MAX_FOREST_ROWS = 60
EXTREMES = 10  # the lowest and highest estimates drawn when summarised
PERCENTILES = (0, 5, 25, 50, 75, 95, 100)


def _percentile_name(p: int) -> str:
    return {0: "lowest", 50: "median", 100: "highest"}.get(p, f"{p}th percentile")


def _summary(rows: list[dict[str, Any]], one_term: bool) -> dict[str, Any] | None:
    """For a tag with many estimates: the extremes to draw and the distribution of the estimates.

    Percentiles by linear interpolation between order statistics (numpy's default; Hyndman and Fan's
    definition 7). Estimates of different terms are on different scales: neither drawn nor summarised.
    """
    if len(rows) <= MAX_FOREST_ROWS:
        return None
    import numpy as np  # noqa: PLC0415

    ordered = sorted(rows, key=lambda row: (row["estimate"], row["label"]))
    finite = [row for row in ordered if np.isfinite(row["estimate"])]
    if not one_term or not finite:
        return {"count": len(rows), "drawn": [], "percentiles": []}
    drawn = finite[:EXTREMES] + finite[-EXTREMES:] if len(finite) > 2 * EXTREMES else finite
    values = np.array([row["estimate"] for row in finite], dtype=float)
    found = np.percentile(values, PERCENTILES)
    statuses = {s: sum(1 for row in rows if row["status"] == s) for s in ("ok", "warn")}
    return {
        "count": len(rows),
        "drawn": drawn,
        "percentiles": [(_percentile_name(p), float(v)) for p, v in zip(PERCENTILES, found, strict=True)],
        "statuses": statuses,
    }
