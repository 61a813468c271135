"""``tables.md`` and ``tables.tex``: the report's tables, ready to paste into a paper."""

from __future__ import annotations

from collections.abc import Sequence

import pandas as pd

from ..text import markdown_table
from .analysis import Analysis, is_estimated
from .tables import booktabs_table, measure_table, tex_escape
from .verdict import friedman_paragraph

#: Measure columns per table before the rest spill into another table (keeps pages narrow).
COLUMNS_PER_TABLE = 5


def _chunks(items: Sequence[str], size: int) -> list[list[str]]:
    return [list(items[i : i + size]) for i in range(0, len(items), size)]


def dataset_tables(analysis: Analysis, dataset: str, style: str) -> list[str]:
    """The tables of one dataset: ranked measures and fit time first, the other measures after."""
    t = analysis.tuned[analysis.tuned.dataset == dataset].sort_values("mean_rank", kind="stable")
    if t.empty:
        return []
    t = t.assign(shown=[analysis.label(m) for m in t["method"]])
    head = [c for c in analysis.rank_by if c in t and t[c].notna().any()] + ["fit_seconds"]
    rest = [c for c in analysis.measures if c not in head and c in t and t[c].notna().any()]
    labels = ["shown", "params"]

    def est(row: pd.Series, col: str) -> bool:
        return is_estimated(analysis, row, col)

    tables = [
        measure_table(t, part, labels, style=style, estimated=est, headers={"shown": "method"})
        for part in [head, *_chunks(rest, COLUMNS_PER_TABLE)]
    ]
    return tables


def overall_rows(analysis: Analysis) -> tuple[list[list[str]], list[str]]:
    """Rows and headers of the across-datasets table."""
    o = analysis.overall
    headers = ["place", "method", "datasets", "mean rank", "Friedman rank"]
    rows = []
    for _, r in o.iterrows():
        name = analysis.label(r["method"])
        fr = r.get("friedman_rank")
        rows.append(
            [
                f"{r['place']:.0f}",
                name,
                str(int(r["datasets"])),
                f"{r['mean_rank']:.2f}",
                "–" if pd.isna(fr) else f"{fr:.2f}",
            ]
        )
    return rows, headers


def tables_markdown(analysis: Analysis) -> str:
    """The whole ``tables.md``."""
    name = analysis.run.suite.name
    parts = [
        f"# {name}: tables",
        "",
        "Values are mean ± sample sd over seeds (95% Student t-intervals of the means over the seeds are "
        "in report.html and summary.csv); the best value of each column is in bold; "
        "↑ higher is better, ↓ lower is better; † marks estimates from sampled pairs or query points "
        "(each seed's 95% interval is in scores.csv). "
        "Methods run over a grid are shown at their best grid point per dataset (tuned).",
        "",
    ]
    rows, headers = overall_rows(analysis)
    if rows:
        parts += [
            "## Across datasets",
            "",
            markdown_table(rows, headers, [True, False, True, True, True]),
            "",
        ]
        if analysis.cd is not None:
            parts += [friedman_paragraph(analysis), ""]
    for d in analysis.run.suite.datasets:
        tables = dataset_tables(analysis, d.name, "markdown")
        if tables:
            parts += [f"## {d.name}", ""]
            for tb in tables:
                parts += [tb, ""]
    return "\n".join(parts)


def tables_latex(analysis: Analysis) -> str:
    """The whole ``tables.tex``: one ``table`` float per table, needs ``\\usepackage{booktabs}``."""
    name = tex_escape(analysis.run.suite.name)
    parts = [
        "% foldbench tables; needs \\usepackage{booktabs}.",
        "% mean $\\pm$ sd over seeds; bold = best per column; $^\\dagger$ = estimate.",
        "",
    ]
    rows, headers = overall_rows(analysis)
    if rows:
        body = [[tex_escape(c) for c in r] for r in rows]
        parts += _float(
            booktabs_table(body, [tex_escape(h) for h in headers], "rlrrr"),
            f"{name}: ranking across datasets (mean rank, 1 = best).",
        )
    for d in analysis.run.suite.datasets:
        for i, tb in enumerate(dataset_tables(analysis, d.name, "latex")):
            what = "ranked measures and fit time" if i == 0 else "further measures"
            parts += _float(
                tb, f"{name}, dataset {tex_escape(d.name)}: {what} (mean $\\pm$ sd over seeds, best in bold)."
            )
    return "\n".join(parts)


def _float(tabular: str, caption: str) -> list[str]:
    return [
        "\\begin{table}[ht]",
        "\\centering",
        "\\small",
        tabular,
        f"\\caption{{{caption}}}",
        "\\end{table}",
        "",
    ]
