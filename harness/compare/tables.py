"""The ranking as Markdown tables: the terminal's tables and ``ranking.md`` are these."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import pandas as pd

from ..metrics import higher_is_better
from ..text import markdown_table, mean_sd, method_label, number, seeds_text
from .rank import Ranking


def arrow(column: str) -> str:
    """``↑`` for a measure where higher is better, else ``↓``."""
    return "↑" if higher_is_better(column) else "↓"


def dataset_table(group: pd.DataFrame, rank_by: Mapping[str, float]) -> str:
    """The ranked table of one dataset: place, method, params, rank-by measures, fit time."""
    cols = [c for c in rank_by if c in group and not group[c].isna().all()]
    headers = (
        ["place", "method", "params", "mean rank"] + [f"{c} {arrow(c)}" for c in cols] + ["fit s", "seeds ok"]
    )
    rows = []
    for _, r in group.iterrows():
        rows.append(
            [
                number(r["place"], 0) if pd.notna(r["place"]) else "–",
                r["method"],
                r["params"],
                number(r["mean_rank"], 2),
            ]
            + [mean_sd(r[c], r.get(f"{c}_sd")) for c in cols]
            + [
                number(r.get("fit_seconds"), 2),
                seeds_text(r),
            ]
        )
    return markdown_table(rows, headers, [True, False, False, True] + [True] * len(cols) + [True, True])


def overall_table(overall: pd.DataFrame, gridded: set[str] | frozenset[str] = frozenset()) -> str:
    """The ranking across datasets: mean of per-dataset mean ranks (methods at their best grid point)."""
    rows = [
        [
            number(r["place"], 0),
            method_label(r["method"], r["method"] in gridded),
            r["params"],
            number(r["mean_rank"], 2),
            str(r["datasets"]),
        ]
        for _, r in overall.iterrows()
    ]
    return markdown_table(
        rows, ["place", "method", "params", "mean rank", "datasets"], [True, False, False, True, True]
    )


def ranking_markdown(suite_name: str, ranking: Ranking, gridded: set[str], notes: Sequence[str] = ()) -> str:
    """The whole ``ranking.md``: the table across datasets first, then one table per dataset."""
    weights = ", ".join(f"{c} ×{w:g}" for c, w in ranking.rank_by.items())
    parts = [
        f"# {suite_name}: ranking",
        "",
        f"Ranked by the mean rank over: {weights} (1 = best; ties share the average rank; "
        "values are mean ± sd over seeds).",
        "",
        "## Across datasets",
        "",
        overall_table(ranking.overall, gridded),
        "",
    ]
    for name, group in ranking.ranked.groupby("dataset", sort=False):
        parts += [f"## {name}", "", dataset_table(group, ranking.rank_by), ""]
    if notes:
        parts += ["## Notes", ""] + [f"- {n}" for n in notes] + [""]
    return "\n".join(parts)
