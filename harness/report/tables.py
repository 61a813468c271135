"""Tables of measures for papers: Markdown and LaTeX (booktabs), best value of each column in bold."""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

import pandas as pd

from ..compare.tables import arrow
from ..metrics import higher_is_better
from ..text import markdown_table, mean_sd

_TEX_ESCAPES = {
    "\\": r"\textbackslash{}",
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
}
_TEX_SYMBOLS = {
    "±": r"$\pm$",
    "↑": r"$\uparrow$",
    "↓": r"$\downarrow$",
    "†": r"$^\dagger$",
    "×": r"$\times$",
    "–": "--",
}


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


def measure_table(
    frame: pd.DataFrame,
    columns: Sequence[str],
    labels: Sequence[str],
    *,
    style: str = "markdown",
    digits: int = 3,
    estimated: Callable[[pd.Series, str], bool] | None = None,
    headers: Mapping[str, str] | None = None,
) -> str:
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
    head = [headers.get(lab, lab) for lab in labels] + [f"{c} {arrow(c)}" for c in cols]
    body = []
    for pos, (_, row) in enumerate(frame.iterrows()):
        cells = [str(row[lab]) for lab in labels]
        for c in cols:
            text = mean_sd(row[c], row.get(f"{c}_sd"), digits)
            if estimated is not None and estimated(row, c) and text != "–":
                text += "†"
            if best[c].iloc[pos]:
                text = f"**{text}**" if style == "markdown" else f"\\textbf{{{tex_escape(text)}}}"
            elif style == "latex":
                text = tex_escape(text)
            cells.append(text)
        if style == "latex":
            cells = [tex_escape(x) for x in cells[: len(labels)]] + cells[len(labels) :]
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
