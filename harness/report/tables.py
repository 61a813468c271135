"""Ranked tables as Markdown (for ``ranking.md`` and the terminal)."""
from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence

import pandas as pd

from ..rank import higher_is_better


def _num(value: object, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    if isinstance(value, float):
        return f"{value:.{digits}f}"
    return str(value)


def mean_sd(mean: float, sd: float, digits: int = 3) -> str:
    """``0.912 ± 0.004`` (``±`` part left out when sd is missing)."""
    if mean is None or (isinstance(mean, float) and math.isnan(mean)):
        return "–"
    if sd is None or (isinstance(sd, float) and math.isnan(sd)):
        return f"{mean:.{digits}f}"
    return f"{mean:.{digits}f} ± {sd:.{digits}f}"


def markdown_table(rows: Sequence[Sequence[str]], headers: Sequence[str],
                   right: Sequence[bool] | None = None) -> str:
    """A pipe table with columns padded for reading as plain text too."""
    right = right or [False] * len(headers)
    cells = [list(map(str, headers))] + [list(map(str, r)) for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]

    def line(r: Sequence[str]) -> str:
        return "| " + " | ".join(c.rjust(w) if a else c.ljust(w) for c, w, a in zip(r, widths, right)) + " |"

    rule = "|" + "|".join(("-" * (w + 1) + ":") if a else ("-" * (w + 2)) for w, a in zip(widths, right)) + "|"
    return "\n".join([line(cells[0]), rule] + [line(r) for r in cells[1:]])


def dataset_table(group: pd.DataFrame, rank_by: Mapping[str, float]) -> str:
    """The ranked table of one dataset: place, method, params, rank-by measures, fit time."""
    cols = [c for c in rank_by if c in group and not group[c].isna().all()]
    headers = ["place", "method", "params", "mean rank"] + [
        f"{c} {'↑' if higher_is_better(c) else '↓'}" for c in cols] + ["fit s", "seeds ok"]
    rows = []
    for _, r in group.iterrows():
        rows.append([_num(r["place"], 0) if pd.notna(r["place"]) else "–", r["method"], r["params"],
                     _num(r["mean_rank"], 2)]
                    + [mean_sd(r[c], r.get(f"{c}_sd")) for c in cols]
                    + [_num(r.get("fit_seconds"), 2),
                       f"{int(r['seeds_ok'])}/{int(r['seeds_ok'] + r['seeds_failed'])}"])
    return markdown_table(rows, headers, [True, False, False, True] + [True] * len(cols) + [True, True])


def overall_table(overall: pd.DataFrame) -> str:
    """Overall ranking table: mean of per-dataset mean ranks."""
    rows = [[_num(r["place"], 0), r["method"], r["params"], _num(r["mean_rank"], 2), str(r["datasets"])]
            for _, r in overall.iterrows()]
    return markdown_table(rows, ["place", "method", "params", "mean rank", "datasets"],
                          [True, False, False, True, True])


def ranking_markdown(suite_name: str, ranked: pd.DataFrame, overall: pd.DataFrame,
                     rank_by: Mapping[str, float], notes: Sequence[str] = ()) -> str:
    """The whole ``ranking.md``: overall table first, then one table per dataset."""
    weights = ", ".join(f"{c} ×{w:g}" for c, w in rank_by.items())
    parts = [f"# {suite_name}: ranking", "",
             f"Ranked by the mean rank over: {weights} (1 = best; ties share the average rank; "
             "values are mean ± sd over seeds).", "",
             "## Across datasets", "", overall_table(overall), ""]
    for name, group in ranked.groupby("dataset", sort=False):
        parts += [f"## {name}", "", dataset_table(group, rank_by), ""]
    if notes:
        parts += ["## Notes", ""] + [f"- {n}" for n in notes] + [""]
    return "\n".join(parts)


# ---------------------------------------------------------------- paper tables (Markdown and LaTeX)

_TEX_ESCAPES = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
                "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}"}
_TEX_SYMBOLS = {"±": r"$\pm$", "↑": r"$\uparrow$", "↓": r"$\downarrow$", "†": r"$^\dagger$",
                "×": r"$\times$", "–": "--"}


def tex_escape(text: str) -> str:
    """Escape LaTeX's special characters and spell our few symbols in math mode."""
    out = "".join(_TEX_ESCAPES.get(ch, ch) for ch in str(text))
    for sym, tex in _TEX_SYMBOLS.items():
        out = out.replace(sym, tex)
    return out


def best_mask(values: pd.Series, higher: bool, digits: int = 3) -> pd.Series:
    """True where a column holds its best value as printed with ``digits`` decimals.

    Comparing the printed values marks every value a reader sees as equal to the best.
    """
    v = pd.to_numeric(values, errors="coerce").round(digits)
    if v.notna().sum() < 2:
        return pd.Series(False, index=values.index)
    target = v.max() if higher else v.min()
    return v.eq(target)


def measure_table(frame: pd.DataFrame, columns: Sequence[str], labels: Sequence[str], *,
                  style: str = "markdown", digits: int = 3,
                  estimated: Callable[[pd.Series, str], bool] | None = None,
                  headers: Mapping[str, str] | None = None) -> str:
    """Rows of configurations, columns of measures as ``mean ± sd``, best per column in bold.

    Parameters
    ----------
    frame : DataFrame
        One row per configuration with the label columns, and for each measure ``m``
        the columns ``m`` (mean) and, when known, ``m_sd``.
    columns : sequence of str
        Measure columns, in order.
    labels : sequence of str
        Columns printed as they are, left of the measures (``method``, ``params``).
    style : {"markdown", "latex"}
        Markdown pipe table or a LaTeX ``tabular`` with booktabs rules.
    digits : int
        Decimals of the measures.
    estimated : callable, optional
        ``estimated(row, column)``; true marks the value with ``†`` (an estimate).
    headers : mapping, optional
        Header text of label columns (default: the column name).

    Returns
    -------
    str
    """
    if style not in ("markdown", "latex"):
        raise ValueError(f"style must be 'markdown' or 'latex', got {style!r}")
    headers = dict(headers or {})
    cols = [c for c in columns if c in frame]
    best = {c: best_mask(frame[c], higher_is_better(c), digits) for c in cols}
    head = [headers.get(lab, lab) for lab in labels] + [
        f"{c} {'↑' if higher_is_better(c) else '↓'}" for c in cols]
    body = []
    for idx, row in frame.iterrows():
        cells = [str(row[lab]) for lab in labels]
        for c in cols:
            text = mean_sd(row[c], row.get(f"{c}_sd"), digits)
            if estimated is not None and estimated(row, c) and text != "–":
                text += "†"
            if best[c].loc[idx]:
                text = f"**{text}**" if style == "markdown" else f"\\textbf{{{tex_escape(text)}}}"
            elif style == "latex":
                text = tex_escape(text)
            cells.append(text)
        if style == "latex":
            cells = [tex_escape(x) for x in cells[:len(labels)]] + cells[len(labels):]
        body.append(cells)
    if style == "markdown":
        return markdown_table(body, head, [False] * len(labels) + [True] * len(cols))
    return booktabs_table(body, [tex_escape(h) for h in head], "l" * len(labels) + "r" * len(cols))


def booktabs_table(rows: Sequence[Sequence[str]], headers: Sequence[str], align: str) -> str:
    """A LaTeX ``tabular`` with ``\\toprule``, ``\\midrule`` and ``\\bottomrule`` (package booktabs).

    Cells are written as given: escape them first (:func:`tex_escape`).
    """
    lines = [f"\\begin{{tabular}}{{{align}}}", "\\toprule", " & ".join(headers) + r" \\", "\\midrule"]
    lines += [" & ".join(r) + r" \\" for r in rows]
    lines += ["\\bottomrule", "\\end{tabular}"]
    return "\n".join(lines)
