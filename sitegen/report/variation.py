"""Where the variation in y goes: the analysis of variance laid out for our pages and anova.csv.

The statistics (``stats.ols.anova_table``, kept in ``fit.json`` as ``anova``) give one
sequential row per term and the scatter left about the line. This module arranges them
the way our readers ask: the whole variation first, then the part each term takes up
(after the terms above it), then what is left about the line, each with its share of
the whole. Nothing is computed here that the statistics did not already give, apart
from the total (the sum of the parts) and the shares.
"""

from __future__ import annotations

from dataclasses import dataclass

from sitegen.model import FitReport

#: anova.csv's columns.
COLUMNS = ("part", "df", "sum_sq", "share_of_total", "mean_sq", "f_stat", "p_value")
TOTAL = "total"
LEFT = "left_about_line"
#: The name the statistics give the leftover row.
_STATS_LEFT = "Residual"


@dataclass(frozen=True, slots=True)
class Part:
    """One line of the variation table."""

    part: str  # "total", a term as the formula library names it, or "left_about_line"
    label: str  # the words on the page
    df: int
    sum_sq: float
    share_of_total: float | None  # fraction of the total (0 to 1); None when the total is zero
    mean_sq: float | None
    f_stat: float | None
    p_value: float | None


def _intercept(r: FitReport) -> bool:
    return "Intercept" in r.terms


def parts(r: FitReport) -> tuple[Part, ...]:
    """The total first, then each term's part, then what is left about the line."""
    terms = [a for a in r.anova if a.source != _STATS_LEFT]
    left = [a for a in r.anova if a.source == _STATS_LEFT]
    if not r.anova:
        return ()
    total_ss = sum(a.sum_sq for a in r.anova)
    total_df = sum(a.df for a in r.anova)

    def share(ss: float) -> float | None:
        return ss / total_ss if total_ss > 0 else None

    about = "its mean" if _intercept(r) else "zero (the model has no intercept)"
    out = [
        Part(
            TOTAL,
            f"All the variation of {r.response or 'y'} about {about}",
            total_df,
            total_ss,
            share(total_ss),
            None,
            None,
            None,
        )
    ]
    for i, a in enumerate(terms):
        after = " after the terms above" if i else ""
        out.append(
            Part(
                a.source,
                f"Taken up by {a.source}{after}",
                a.df,
                a.sum_sq,
                share(a.sum_sq),
                a.mean_sq,
                a.f_stat,
                a.p_value,
            )
        )
    for a in left:
        out.append(Part(LEFT, "Left as scatter about the line", a.df, a.sum_sq, share(a.sum_sq), a.mean_sq, None, None))
    return tuple(out)


def rows(r: FitReport) -> list[list[object]]:
    """anova.csv's rows, in COLUMNS order."""
    return [[getattr(p, c) for c in COLUMNS] for p in parts(r)]
