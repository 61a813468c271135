"""``report.html``: one self-contained page (inline CSS, images as data URIs, no scripts)."""
from __future__ import annotations

import base64
import html
import math
from collections.abc import Mapping, Sequence
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from .. import __version__
from ..rank import higher_is_better
from . import palette
from .analysis import Analysis, is_estimated
from .tables import best_mask

_CSS = f"""
:root {{ --teal: {palette.TEAL}; --ochre: {palette.OCHRE}; --slate: {palette.SLATE};
        --ink: {palette.INK}; --paper: {palette.PAPER}; --sand: {palette.SAND}; --mist: {palette.MIST}; }}
* {{ box-sizing: border-box; }}
body {{ margin: 0; background: var(--paper); color: var(--ink);
       font: 15px/1.5 Georgia, 'DejaVu Serif', serif; }}
header {{ background: var(--teal); color: var(--paper); padding: 1.4em 6vw 1.1em; }}
header h1 {{ margin: 0; font-size: 1.7em; letter-spacing: .02em; }}
header .sub {{ opacity: .85; font-size: .92em; font-family: 'DejaVu Sans', Verdana, sans-serif; }}
main {{ padding: 0 6vw 3em; max-width: 1500px; }}
h2 {{ color: var(--teal); border-bottom: 3px solid var(--ochre); padding-bottom: .15em; margin-top: 2em; }}
h3 {{ color: var(--slate); margin-bottom: .3em; }}
.verdict {{ background: #fff; border-left: 8px solid var(--ochre); padding: .8em 1.3em; margin-top: 1.5em;
           box-shadow: 0 1px 0 var(--mist); }}
.verdict p {{ margin: .45em 0; font-size: 1.05em; }}
.caution {{ background: var(--sand); padding: .6em 1.2em; margin: 1em 0; }}
.caution li {{ margin: .3em 0; }}
table {{ border-collapse: collapse; margin: .6em 0 1.2em; font: 13px/1.35 'DejaVu Sans', Verdana, sans-serif; }}
th {{ text-align: left; color: var(--paper); background: var(--slate); padding: .35em .7em; font-weight: 600; }}
td {{ padding: .3em .7em; border-bottom: 1px solid var(--mist); vertical-align: top; }}
td.num {{ text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }}
td .ci {{ display: block; color: var(--slate); font-size: .82em; }}
td.best {{ font-weight: 700; color: var(--teal); }}
tr:nth-child(even) td {{ background: rgba(86,103,122,.05); }}
figure {{ margin: 1em 0 2em; }}
figure img {{ max-width: 100%; height: auto; border: 1px solid var(--mist); background: #fff; }}
figcaption {{ color: var(--slate); font-size: .9em; max-width: 70em; }}
.small {{ color: var(--slate); font-size: .88em; }}
details summary {{ cursor: pointer; color: var(--teal); }}
footer {{ color: var(--slate); font-size: .85em; padding: 1em 6vw 2em; border-top: 1px solid var(--mist); }}
"""


def _e(text: object) -> str:
    return html.escape(str(text), quote=True)


def image_tag(path: Path, alt: str) -> str:
    """An ``<img>`` whose PNG bytes are embedded as a base64 data URI."""
    data = base64.b64encode(Path(path).read_bytes()).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{_e(alt)}">'


def table(headers: Sequence[str], rows: Sequence[Sequence[str]], numeric: Sequence[bool],
          best: Sequence[Sequence[bool]] | None = None) -> str:
    """An HTML table; cells are HTML already (escape text before)."""
    head = "".join(f"<th>{h}</th>" for h in headers)
    body = []
    for i, r in enumerate(rows):
        cells = []
        for j, c in enumerate(r):
            cls = ["num"] if numeric[j] else []
            if best is not None and best[i][j]:
                cls.append("best")
            attr = f' class="{" ".join(cls)}"' if cls else ""
            cells.append(f"<td{attr}>{c}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _num(v: object, digits: int = 3) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "–"
    return f"{v:.{digits}f}" if isinstance(v, float) else _e(v)


def _measure_cell(analysis: Analysis, row: pd.Series, col: str) -> str:
    mean, sd = row.get(col), row.get(f"{col}_sd")
    if mean is None or pd.isna(mean):
        return "–"
    text = f"{mean:.3f}" if pd.isna(sd) else f"{mean:.3f} ± {sd:.3f}"
    if is_estimated(analysis, row, col):
        text += "†"
    lo, hi = row.get(f"{col}_lo"), row.get(f"{col}_hi")
    ci = "" if lo is None or pd.isna(lo) else f'<span class="ci">95% [{lo:.3f}, {hi:.3f}]</span>'
    return _e(text) + ci


def dataset_html(analysis: Analysis, frame: pd.DataFrame, columns: Sequence[str]) -> str:
    """Per-dataset table: place, method, params, mean rank, then measures with intervals."""
    frame = frame.sort_values("mean_rank", kind="stable")
    cols = [c for c in columns if c in frame and frame[c].notna().any()]
    marks = {c: best_mask(frame[c], higher_is_better(c), 3) for c in cols}
    headers = ["place", "method", "params", "mean rank"] + [
        _e(f"{c} {'↑' if higher_is_better(c) else '↓'}") for c in cols] + ["seeds ok"]
    rows, best = [], []
    for idx, r in frame.iterrows():
        name = r["method"] + (" (tuned)" if r.get("tuned") else "")
        rows.append([_num(r["place"], 0), _e(name), _e(r["params"]), _num(r["mean_rank"], 2)]
                    + [_measure_cell(analysis, r, c) for c in cols]
                    + [f"{int(r['seeds_ok'])}/{int(r['seeds_ok'] + r['seeds_failed'])}"])
        best.append([False] * 4 + [bool(marks[c].loc[idx]) for c in cols] + [False])
    return table(headers, rows, [True, False, False, True] + [True] * len(cols) + [True], best)


def _figure(path: Path | None, alt: str, caption: str) -> str:
    if path is None:
        return ""
    return f"<figure>{image_tag(path, alt)}<figcaption>{caption}</figcaption></figure>"


def render(analysis: Analysis, sentences: Sequence[str], figures: Mapping[str, Path | None]) -> str:
    """The whole page as text.

    Parameters
    ----------
    analysis : Analysis
    sentences : sequence of str
        The verdict.
    figures : mapping
        Figure name (``embeddings``, ``heatmaps``, ``rnx``, ``shepard``, ``cd``, ``pareto``) to
        its PNG, or ``None`` when there is none.
    """
    run, suite = analysis.run, analysis.run.suite
    counts = run.scores["status"].value_counts().to_dict()
    k = suite.scoring.ks[0]
    weights = ", ".join(f"{c} ×{w:g}" for c, w in analysis.rank_by.items())
    out = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
           '<meta name="viewport" content="width=device-width, initial-scale=1">',
           f"<title>{_e(suite.name)} · foldbench field report</title><style>{_CSS}</style></head><body>",
           f"<header><h1>{_e(suite.name)} — field report</h1><div class='sub'>run {_e(run.path.name)} · "
           f"{len(suite.datasets)} datasets × {len(suite.methods)} methods × {len(suite.seeds)} seeds · "
           + " · ".join(f"{v} {_e(s)}" for s, v in counts.items()) + "</div></header><main>"]
    out.append("<section class='verdict'><h2 style='margin-top:.2em'>Verdict</h2>"
               + "".join(f"<p>{_e(s)}</p>" for s in sentences) + "</section>")
    if analysis.notes:
        out.append("<section class='caution'><strong>Read with care</strong><ul>"
                   + "".join(f"<li>{_e(n)}</li>" for n in analysis.notes) + "</ul></section>")

    out.append("<h2>Across datasets</h2>")
    out.append(f"<p class='small'>Each method at its best grid point per dataset. Mean rank = mean over "
               f"datasets of the weighted mean rank over {_e(weights)}. The Friedman rank ranks that "
               f"per-dataset mean rank again among the methods (ties share the average).</p>")
    o = analysis.overall
    if not o.empty:
        rows = [[_num(r["place"], 0), _e(r["method"] + (" (tuned)" if r["method"] in analysis.gridded_methods
                                                       else "")),
                 _e(r["params"]), str(int(r["datasets"])), _num(r["mean_rank"], 2),
                 _num(r.get("friedman_rank"), 2)] for _, r in o.iterrows()]
        out.append(table(["place", "method", "parameters used", "datasets", "mean rank", "Friedman rank"],
                         rows, [True, False, False, True, True, True]))
    f = analysis.friedman
    if f is not None:
        groups = "; ".join("{" + ", ".join(g) + "}" for g in analysis.groups) or "none"
        out.append(f"<p>Friedman χ² = {f.statistic:.2f} (p = {f.pvalue:.3g}); Iman–Davenport F = "
                   f"{f.iman_davenport:.2f} (p = {f.iman_davenport_pvalue:.3g}); {f.n_blocks} datasets, "
                   f"{f.n_treatments} methods. Nemenyi critical difference at α = {analysis.alpha:g}: "
                   f"{analysis.cd:.2f}. Groups not told apart: {_e(groups)}.</p>")
    out.append(_figure(figures.get("cd"), "critical difference diagram",
                       "Methods placed at their mean Friedman rank; the teal bars join methods whose mean "
                       "ranks differ by less than the critical difference (ochre ruler), so the data do "
                       "not tell them apart."))

    out.append("<h2>Quality against fit time</h2>")
    out.append(_figure(figures.get("pareto"), "quality against fit time",
                       f"Every configuration per dataset: {_e(analysis.quality)} against fit seconds "
                       "(log). Ringed points joined by the dashed steps form the Pareto front: nothing "
                       "else is both better and faster."))
    front = analysis.ranked[analysis.ranked["pareto"]]
    if not front.empty:
        items = [f"<li><b>{_e(d)}</b>: " + ", ".join(_e(f"{r.method} ({r.params})" if r.params != "-"
                                                      else r.method) for r in g.itertuples()) + "</li>"
                 for d, g in front.groupby("dataset", sort=False)]
        out.append("<p class='small'>On the front:</p><ul class='small'>" + "".join(items) + "</ul>")

    out.append("<h2>Dataset by dataset</h2>")
    out.append("<p class='small'>Mean ± sample sd over seeds, with the 95% percentile-bootstrap "
               "interval of the mean beneath (an estimate; with few seeds, a rough one). Best per column "
               "in bold teal. † = estimated from sampled pairs or points.</p>")
    shown = list(analysis.rank_by) + ["fit_seconds"]
    for d in suite.datasets:
        tuned = analysis.tuned[analysis.tuned.dataset == d.name]
        if tuned.empty:
            continue
        out.append(f"<h3>{_e(d.name)}</h3>")
        out.append(dataset_html(analysis, tuned, shown))
        rest = [c for c in analysis.measures if c not in shown]
        out.append("<details><summary>every measure</summary>" + dataset_html(analysis, tuned, rest)
                   + "</details>")
        everything = analysis.ranked[analysis.ranked.dataset == d.name]
        if len(everything) > len(tuned):
            out.append("<details><summary>every grid point</summary>"
                       + dataset_html(analysis, everything, shown) + "</details>")

    out.append("<h2>Pictures</h2>")
    out.append(_figure(figures.get("embeddings"), "embeddings",
                       "One seed (the lowest that finished) per method and dataset."))
    out.append(_figure(figures.get("heatmaps"), "heat maps per measure",
                       "Mean over seeds, datasets × methods; each panel has its own scale; darker teal is "
                       "better in that measure's direction."))
    out.append(_figure(figures.get("rnx"), "R_NX curves",
                       "R_NX(K): neighbourhood agreement at every size K beyond what a random embedding "
                       "gives (0 = random, 1 = perfect), mean over seeds, log-K axis."))
    out.append(_figure(figures.get("shepard"), "Shepard diagrams",
                       "Sampled pairs: distance in the data against distance in the embedding (scaled by "
                       "the least-squares factor); the ochre line is equality. Top methods per dataset."))

    out.append("<h2>Seed stability</h2>")
    st = analysis.stability.dropna(subset=["knn_overlap"])
    if st.empty:
        out.append("<p>Only one seed per configuration finished, so stability is not measured.</p>")
    else:
        rows = [[_e(r.dataset), _e(r.method), _e(r.params), _num(r.knn_overlap),
                 _num(r.procrustes), str(int(r.pairs)) + (" (sampled)" if r.sampled else "")]
                for r in st.itertuples()]
        out.append(f"<p class='small'>Mean over seed pairs. k-NN overlap@{k}: share of each point's {k} "
                   "nearest neighbours two seeds agree on (1 = identical). Procrustes disparity: residual "
                   "after the best shift, scale, rotation and reflection (0 = identical shape).</p>")
        out.append(table(["dataset", "method", "params", f"k-NN overlap@{k} ↑", "Procrustes ↓", "pairs"],
                         rows, [False, False, False, True, True, True]))

    out.append("<h2>How the numbers were made</h2><ul class='small'>"
               "<li>Ranks: within each dataset every configuration is ranked on each ranked measure "
               "(1 = best, ties share the average rank); the mean rank weights them as the suite says.</li>"
               "<li>Friedman test over datasets (blocks) and methods (treatments), with the tie "
               "correction, and its Iman–Davenport F form; Nemenyi critical difference "
               "CD = q<sub>α</sub>·√(k(k+1)/(6N)), q<sub>α</sub> = Studentized range quantile (∞ degrees "
               "of freedom) / √2 (Demšar 2006).</li>"
               "<li>Intervals: percentile bootstrap of the mean over seeds (Efron &amp; Tibshirani 1993), "
               "seeded, so the same run gives the same interval.</li>"
               "<li>Stability: k-NN overlap and the Procrustes disparity of scipy.spatial.procrustes "
               "(Gower 1975), mean over seed pairs.</li>"
               "<li>Pareto front: configurations no other configuration beats on both quality and fit "
               "time.</li></ul>")
    stamp = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    out.append(f"</main><footer>foldbench {__version__} · written {stamp} · suite hash "
               f"{_e(run.manifest.get('suite', {}).get('hash', '?'))}</footer></body></html>")
    return "\n".join(x for x in out if x)
