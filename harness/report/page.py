"""``report.html``: one self-contained page (inline CSS, images as data URIs, no scripts).

The page's frame and style live in ``templates/`` (``page.html``, ``page.css``,
``method.html``), filled with :class:`string.Template`; each section's HTML is
built by a small function here.
"""

from __future__ import annotations

import base64
import html
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime
from importlib.resources import files
from pathlib import Path
from string import Template

import pandas as pd

from ..compare.heldout import GAP_PREFIX, GAP_SENTENCE, best_generalisers, with_gaps
from ..compare.tables import arrow
from ..datasets import Dataset
from ..metrics import higher_is_better
from ..text import interval_text, mean_sd, number, seeds_text
from . import palette
from .analysis import Analysis, is_estimated
from .pointwise import PointDefects, concentration_sentence, defect_by_class
from .tables import best_mask
from .verdict import friedman_paragraph

_TEMPLATES = files("harness.report") / "templates"


def _template(name: str) -> Template:
    return Template((_TEMPLATES / name).read_text(encoding="utf-8"))


def _e(text: object) -> str:
    return html.escape(str(text), quote=True)


def image_tag(path: Path, alt: str) -> str:
    """An ``<img>`` whose PNG bytes are embedded as a base64 data URI."""
    data = base64.b64encode(Path(path).read_bytes()).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{_e(alt)}">'


def table(
    headers: Sequence[str],
    rows: Sequence[Sequence[str]],
    numeric: Sequence[bool],
    best: Sequence[Sequence[bool]] | None = None,
) -> str:
    """An HTML table; cells are HTML already (escape text before)."""
    head = "".join(f"<th>{h}</th>" for h in headers)
    body = []
    for i, r in enumerate(rows):
        cells = []
        for j, c in enumerate(r):
            cls = (["num"] if numeric[j] else []) + (["best"] if best is not None and best[i][j] else [])
            attr = f' class="{" ".join(cls)}"' if cls else ""
            cells.append(f"<td{attr}>{c}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _num(v: object, digits: int = 3) -> str:
    return _e(number(v, digits))


def _measure_cell(analysis: Analysis, row: pd.Series, col: str) -> str:
    mean, sd = row.get(col), row.get(f"{col}_sd")
    if mean is None or pd.isna(mean):
        return "–"
    text = mean_sd(float(mean), None if sd is None or pd.isna(sd) else float(sd))
    if is_estimated(analysis, row, col):
        text += "†"
    bounds = interval_text(row.get(f"{col}_lo"), row.get(f"{col}_hi"))
    ci = "" if bounds is None else f'<span class="ci">95% t, {int(row["seeds_ok"])} seeds {bounds}</span>'
    return _e(text) + ci


def dataset_html(analysis: Analysis, frame: pd.DataFrame, columns: Sequence[str]) -> str:
    """Per-dataset table: place, method, params, mean rank, then measures with intervals."""
    frame = frame.sort_values("mean_rank", kind="stable")
    cols = [c for c in columns if c in frame and frame[c].notna().any()]
    marks = {c: best_mask(frame[c], higher_is_better(c), 3) for c in cols}
    headers = (
        ["place", "method", "params", "mean rank"] + [_e(f"{c} {arrow(c)}") for c in cols] + ["seeds ok"]
    )
    rows, best = [], []
    for pos, (_, r) in enumerate(frame.iterrows()):
        name = analysis.label(r["method"]) if r.get("tuned") else r["method"]
        rows.append(
            [_num(r["place"], 0), _e(name), _e(r["params"]), _num(r["mean_rank"], 2)]
            + [_measure_cell(analysis, r, c) for c in cols]
            + [seeds_text(r)]
        )
        best.append([False] * 4 + [bool(marks[c].iloc[pos]) for c in cols] + [False])
    return table(headers, rows, [True, False, False, True] + [True] * len(cols) + [True], best)


def _figure(path: Path | None, alt: str, caption: str) -> str:
    if path is None:
        return ""
    return f"<figure>{image_tag(path, alt)}<figcaption>{caption}</figcaption></figure>"


def _cautions(analysis: Analysis) -> str:
    if not analysis.notes:
        return ""
    items = "".join(f"<li>{_e(n)}</li>" for n in analysis.notes)
    return f"<section class='caution'><strong>Read with care</strong><ul>{items}</ul></section>"


def _across(analysis: Analysis, figures: Mapping[str, Path | None]) -> str:
    weights = ", ".join(f"{c} ×{w:g}" for c, w in analysis.rank_by.items())
    out = [
        f"<p class='small'>Each method at its best grid point per dataset. Mean rank = mean over datasets "
        f"of the weighted mean rank over {_e(weights)}. The Friedman rank ranks that per-dataset mean rank "
        "again among the methods (ties share the average).</p>"
    ]
    o = analysis.overall
    if not o.empty:
        rows = [
            [
                _num(r["place"], 0),
                _e(analysis.label(r["method"])),
                _e(r["params"]),
                str(int(r["datasets"])),
                _num(r["mean_rank"], 2),
                _num(r.get("friedman_rank"), 2),
            ]
            for _, r in o.iterrows()
        ]
        out.append(
            table(
                ["place", "method", "parameters used", "datasets", "mean rank", "Friedman rank"],
                rows,
                [True, False, False, True, True, True],
            )
        )
    f = analysis.friedman
    if f is not None and analysis.cd is not None:
        out.append(f"<p>{_e(friedman_paragraph(analysis))}</p>")
    out.append(
        _figure(
            figures.get("cd"),
            "critical difference diagram",
            "Methods placed at their mean Friedman rank; the teal bars join methods whose mean ranks "
            "differ by less than the critical difference (ochre ruler), so the data do not tell them "
            "apart. The critical difference is the Nemenyi test's asymptotic value (Demšar 2006); "
            "with fewer than 10 datasets treat it as a rough guide.",
        )
    )
    return "\n".join(x for x in out if x)


def _pareto(analysis: Analysis, figures: Mapping[str, Path | None]) -> str:
    out = [
        _figure(
            figures.get("pareto"),
            "quality against fit time",
            f"Every configuration per dataset: {_e(analysis.quality)} against fit seconds (log). Ringed "
            "points joined by the dashed steps form the Pareto front: nothing else is both better and "
            "faster.",
        )
    ]
    front = analysis.ranked[analysis.ranked["pareto"]]
    if not front.empty:
        items = [
            f"<li><b>{_e(d)}</b>: "
            + ", ".join(
                _e(f"{r.method} ({r.params})" if r.params != "-" else r.method) for r in g.itertuples()
            )
            + "</li>"
            for d, g in front.groupby("dataset", sort=False)
        ]
        out.append("<p class='small'>On the front:</p><ul class='small'>" + "".join(items) + "</ul>")
    return "\n".join(x for x in out if x)


def _datasets(analysis: Analysis) -> str:
    out = [
        "<p class='small'>Mean ± sample sd over seeds, with the 95% Student t-interval of the mean "
        "over the seeds beneath (t with seeds − 1 degrees of freedom, Student 1908; it assumes the seed "
        "scores are roughly normal, and with 3 seeds it is wide because 3 seeds say little). Best per "
        "column in bold teal. † = estimated from sampled pairs or query points: each seed's value has "
        "its own 95% interval (Wilson score interval for query points, jackknife for pairs) in the "
        "*_ci_low and *_ci_high columns of scores.csv.</p>"
    ]
    shown = [*list(analysis.rank_by), "fit_seconds"]
    for d in analysis.run.suite.datasets:
        tuned = analysis.tuned[analysis.tuned.dataset == d.name]
        if tuned.empty:
            continue
        out.append(f"<h3>{_e(d.name)}</h3>")
        out.append(dataset_html(analysis, tuned, shown))
        rest = [c for c in analysis.measures if c not in shown]
        out.append(
            "<details><summary>every measure</summary>" + dataset_html(analysis, tuned, rest) + "</details>"
        )
        everything = analysis.ranked[analysis.ranked.dataset == d.name]
        if len(everything) > len(tuned):
            out.append(
                "<details><summary>every grid point</summary>"
                + dataset_html(analysis, everything, shown)
                + "</details>"
            )
    return "\n".join(out)


def _pictures(figures: Mapping[str, Path | None]) -> str:
    parts = [
        ("embeddings", "embeddings", "One seed (the lowest that finished) per method and dataset."),
        (
            "heatmaps",
            "heat maps per measure",
            "Mean over seeds, datasets × methods; each panel has its own scale; "
            "darker teal is better in that measure's direction.",
        ),
        (
            "rnx",
            "R_NX curves",
            "R_NX(K): neighbourhood agreement at every size K beyond what a random embedding "
            "gives (0 = random, 1 = perfect), mean over seeds, log-K axis.",
        ),
        (
            "shepard",
            "Shepard diagrams",
            "Sampled pairs: distance in the data against distance in the embedding "
            "(scaled by the least-squares factor); the ochre line is equality. Top methods per dataset.",
        ),
    ]
    return "\n".join(x for x in (_figure(figures.get(k), alt, cap) for k, alt, cap in parts) if x)


def _failures(
    figures: Mapping[str, Path | None],
    defects: Mapping[str, list[PointDefects]],
    datasets: Mapping[str, Dataset],
) -> str:
    if not defects:
        return "<p>No per-point tables in this run (they are written for every ok cell).</p>"
    out = [
        "<p class='small'>Each point coloured by its own share of the defect: its trustworthiness "
        "defect (top row: neighbours in the picture that were not neighbours in the data) and its "
        "continuity defect (bottom row: data neighbours the picture pushed away). One seed per "
        "method; one colour scale per dataset. Pale points kept their neighbourhood.</p>"
    ]
    for name, per_method in defects.items():
        out.append(f"<h3>{_e(name)}</h3>")
        out.append(
            _figure(
                figures.get(f"points:{name}"),
                f"per-point defects on {name}",
                _e(concentration_sentence(per_method)),
            )
        )
        by_class = defect_by_class(per_method, datasets.get(name))
        if by_class is not None and not by_class.empty:
            rows = [[_e(c)] + [_num(v) for v in r] for c, r in zip(by_class.index, by_class.to_numpy())]
            out.append(
                "<p class='small'>Mean trustworthiness defect by class (higher = the method damages "
                "that class's neighbourhoods more).</p>"
                + table(
                    ["class", *(_e(m) for m in by_class.columns)],
                    rows,
                    [False] + [True] * len(by_class.columns),
                )
            )
    return "\n".join(x for x in out if x)


def _stability(analysis: Analysis) -> str:
    st = analysis.stability.dropna(subset=["knn_overlap"])
    if st.empty:
        return "<p>Only one seed per configuration finished, so stability is not measured.</p>"
    k = analysis.run.suite.scoring.ks[0]
    rows = [
        [
            _e(r["dataset"]),
            _e(r["method"]),
            _e(r["params"]),
            _num(r["knn_overlap"]),
            _num(r["procrustes"]),
            f"{int(r['pairs'])}{' (sampled)' if r['sampled'] else ''}",
        ]
        for r in st.to_dict("records")
    ]
    return (
        f"<p class='small'>Mean over seed pairs. k-NN overlap@{k}: share of each point's {k} nearest "
        "neighbours two seeds agree on (1 = identical). Procrustes disparity: residual after the best shift, "
        "scale, rotation and reflection (0 = identical shape).</p>"
        + table(
            ["dataset", "method", "params", f"k-NN overlap@{k} ↑", "Procrustes ↓", "pairs"],
            rows,
            [False, False, False, True, True, True],
        )
    )


def _heldout(analysis: Analysis) -> str:
    """The held-out section: in-sample, held-out and gap per configuration (empty without a holdout)."""
    k = analysis.run.suite.scoring.ks[0]
    table_ = with_gaps(analysis.ranked, analysis.run.scores)
    t = f"trustworthiness@{k}"
    if f"{GAP_PREFIX}{t}" not in table_:
        return ""
    rows = []
    for r in table_.to_dict("records"):
        shown = r.get("out_of_sample") or "none"
        if isinstance(r.get("heldout_reason"), str) and r["heldout_reason"]:
            shown = f"{shown} ({r['heldout_reason']})"
        rows.append(
            [_e(r["dataset"]), _e(r["method"]), _e(r["params"]), _e(shown)]
            + [_num(r.get(c)) for c in (t, f"heldout_{t}", f"{GAP_PREFIX}{t}", f"heldout_placement@{k}")]
        )
    headers = ["dataset", "method", "params", "out-of-sample map", f"{t} in-sample", "held-out", "gap"]
    best = "".join(f"<p>{_e(sentence)}</p>" for sentence in best_generalisers(table_, k))
    return (
        f"<h2>Held-out points</h2><p class='small'>{_e(GAP_SENTENCE)}</p>"
        + table([*headers, f"placement@{k} ↑"], rows, [False] * 4 + [True] * 4)
        + best
    )


def render(
    analysis: Analysis,
    sentences: Sequence[str],
    figures: Mapping[str, Path | None],
    version: str = "",
    defects: Mapping[str, list[PointDefects]] | None = None,
    datasets: Mapping[str, Dataset] | None = None,
) -> str:
    """The whole page as text.

    Parameters
    ----------
    analysis : Analysis
    sentences : sequence of str
        The verdict.
    figures : mapping
        Figure name (``embeddings``, ``heatmaps``, ``rnx``, ``shepard``, ``cd``, ``pareto``) to
        its PNG, or ``None`` when there is none.
    version : str
        foldbench's version, for the footer.
    defects : mapping, optional
        Per dataset, the per-point defects of each method (``points:<dataset>`` figures).
    datasets : mapping, optional
        The reloaded datasets (labels for the defect-by-class tables).
    """
    run, suite = analysis.run, analysis.run.suite
    counts = run.scores["status"].value_counts().to_dict()
    colours = {
        name.lower(): getattr(palette, name)
        for name in ("TEAL", "OCHRE", "SLATE", "INK", "PAPER", "SAND", "MIST")
    }
    stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    subtitle = (
        f"run {_e(run.path.name)} · {len(suite.datasets)} datasets × {len(suite.methods)} methods × "
        f"{len(suite.seeds)} seeds · " + " · ".join(f"{v} {_e(s)}" for s, v in counts.items())
    )
    return _template("page.html").substitute(
        suite=_e(suite.name),
        css=_template("page.css").substitute(colours),
        subtitle=subtitle,
        verdict="".join(f"<p>{_e(s)}</p>" for s in sentences),
        cautions=_cautions(analysis),
        across=_across(analysis, figures),
        pareto=_pareto(analysis, figures),
        datasets=_datasets(analysis),
        pictures=_pictures(figures),
        failures=_failures(figures, defects or {}, datasets or {}),
        stability=_stability(analysis),
        heldout=_heldout(analysis),
        method=(_TEMPLATES / "method.html").read_text(encoding="utf-8"),
        footer=f"foldbench {_e(version)} · written {stamp} · suite hash "
        f"{_e(run.manifest.get('suite', {}).get('hash', '?'))}",
    )
