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
        for r in members:
            usable = r.compare_term and r.status != "error" and not r.pooled_contrast
            c = r.coefficient(r.compare_term) if usable and r.compare_term else None
            if c is not None:
                rows.append(
                    {
                        "label": r.title,
                        "estimate": c.estimate,
                        "low": c.ci_low,
                        "high": c.ci_high,
                        "status": r.status,
                        "term": c.term,
                        "se": c.std_error,
                    }
                )
        terms = sorted({row["term"] for row in rows})
        forest = (
            charts.forest_chart(rows, terms[0] if len(terms) == 1 else "estimate of each dataset's term")
            if len(rows) >= 2  # one dataset has nothing to be compared with; its page shows its interval
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
        blocks.append({"name": tag, "reports": members, "forest": forest, "caption": caption, "test": test})
    return blocks
