"""The verdict: which method to pick for which dataset, in plain sentences made from the numbers."""

from __future__ import annotations

import math

import pandas as pd

from ..compare.stats import ASYMPTOTIC_MIN_DATASETS
from ..metrics import MEASURES, measure_stem
from ..text import mean_sd, pvalue_text, seconds
from .analysis import Analysis

_STRENGTH = {
    "local": "keeps neighbourhoods best",
    "global": "keeps pairwise distances best",
    "labels": "separates the labelled classes best",
    "latent": "recovers the hidden coordinates best",
}
#: A speed-up below this is not worth a sentence.
_WORTH_SAYING = 2.0


def value_sd(row: pd.Series, column: str, digits: int = 2) -> str:
    """``0.99 ± 0.01`` (no ``±`` with one seed, never ``± 0.00``: see :func:`harness.text.mean_sd`)."""
    mean, sd = row.get(column), row.get(f"{column}_sd")
    if mean is None or not math.isfinite(float(mean)):
        return "–"
    return mean_sd(float(mean), None if sd is None else float(sd), digits)


def dataset_sentence(analysis: Analysis, dataset: str) -> str | None:
    """One or two sentences on the method to pick for ``dataset`` and why."""
    t = analysis.tuned[analysis.tuned.dataset == dataset].dropna(subset=["mean_rank"])
    if t.empty:
        return None
    t = t.sort_values("mean_rank", kind="stable")
    best = t.iloc[0]
    cols = [c for c in analysis.rank_by if c in t and pd.notna(best.get(c))]
    won = [c for c in cols if best.get(f"rank_{c}") == t[f"rank_{c}"].min()] if cols else []
    name = analysis.label(best["method"])
    if won:
        scope = MEASURES[measure_stem(won[0])].scope
        why = f"{_STRENGTH.get(scope, 'scores best')} ({won[0]} {value_sd(best, won[0])})"
    elif cols:
        why = f"is the best compromise ({cols[0]} {value_sd(best, cols[0])})"
    else:
        why = "ranks first"
    text = (
        f"On {dataset}, pick {name}: it {why} and leads the ranking "
        f"(mean rank {best['mean_rank']:.1f} among {len(t)} methods over {len(cols)} ranked measures)."
    )
    if len(t) > 1:
        second = t.iloc[1]
        if second["mean_rank"] == best["mean_rank"]:
            text += f" {analysis.label(second['method'])} ties with it."
    fast = t.dropna(subset=["fit_seconds"]).sort_values("fit_seconds", kind="stable")
    if not fast.empty and pd.notna(best.get("fit_seconds")):
        quick = fast.iloc[0]
        ratio = best["fit_seconds"] / max(quick["fit_seconds"], 1e-9)
        if quick["method"] != best["method"] and ratio >= _WORTH_SAYING:
            head = cols[0] if cols else None
            cost = (
                f" but reaches {head} {value_sd(quick, head)}" if head and pd.notna(quick.get(head)) else ""
            )
            text += (
                f" {analysis.label(quick['method'])} is {ratio:.0f}× faster "
                f"({seconds(quick['fit_seconds'])} vs {seconds(best['fit_seconds'])}){cost}."
            )
        elif quick["method"] == best["method"]:
            text += f" It is also the fastest here ({seconds(best['fit_seconds'])})."
    return text


def overall_sentence(analysis: Analysis) -> str | None:
    """One sentence across datasets, with the Friedman test and the critical difference."""
    o = analysis.overall
    if o is None or o.empty:
        return None
    top = o.iloc[0]
    n_ds = len(analysis.run.suite.datasets)
    text = (
        f"Across {n_ds} dataset{'s' if n_ds != 1 else ''}, {analysis.label(top['method'])} has the "
        f"best mean rank ({top['mean_rank']:.2f})."
    )
    f = analysis.friedman
    if f is None or analysis.cd is None:
        return text + " Too few datasets or methods for a test of significance, so treat the order as a hint."
    names = analysis.friedman_methods
    best_i = int(min(range(len(names)), key=lambda i: f.mean_ranks[i]))
    near = [
        names[i]
        for i in range(len(names))
        if i != best_i and f.mean_ranks[i] - f.mean_ranks[best_i] < analysis.cd
    ]
    # The decision rests on the permutation p-value: it holds its level at any number of datasets.
    p = f.permutation.pvalue
    verdict = "finds" if p < analysis.alpha else "does not find"
    text += (
        f" The Friedman test {verdict} a difference among the {f.n_treatments} methods "
        f"(χ² = {f.statistic:.2f}, {pvalue_text(p)} by {f.permutation.method}, {f.n_blocks} datasets)"
    )
    if p >= analysis.alpha:
        # Without a difference overall, pairwise claims from the critical difference are not made.
        return text + "; so no method is shown to beat another."
    cd = f"critical difference ({analysis.cd:.2f}{'' if f.asymptotic_ok else ', asymptotic'})"
    if near:
        text += (
            f"; {', '.join(analysis.label(m) for m in near)} "
            f"{'is' if len(near) == 1 else 'are'} within the {cd} "
            f"of {analysis.label(names[best_i])} and cannot be told apart from it."
        )
    else:
        text += f"; every other method is more than the {cd} behind."
    return text


def friedman_paragraph(analysis: Analysis) -> str:
    """The rank tests across datasets in words: which p-value, which approximation, which caveat."""
    f = analysis.friedman
    if f is None or analysis.cd is None:
        return ""
    groups = "; ".join("{" + ", ".join(g) + "}" for g in analysis.groups) or "none"
    text = (
        f"Friedman test (Friedman 1937) over {f.n_blocks} datasets and {f.n_treatments} methods: "
        f"χ² = {f.statistic:.2f}, {pvalue_text(f.permutation.pvalue)} ({f.permutation.method} over the "
        "rank orders within each dataset, which holds its level at any number of datasets)."
    )
    if f.asymptotic_ok:
        text += (
            f" Asymptotic p-values: chi-square {pvalue_text(f.pvalue)}; Iman–Davenport "
            f"F = {f.iman_davenport:.2f}, {pvalue_text(f.iman_davenport_pvalue)} (Iman & Davenport 1980)."
        )
    else:
        text += (
            f" The chi-square and Iman–Davenport approximations are not shown: with fewer than "
            f"{ASYMPTOTIC_MIN_DATASETS} datasets they reject a true null too often (Demšar 2006)."
        )
    text += f" Nemenyi critical difference at α = {analysis.alpha:g}: {analysis.cd:.2f}"
    if not f.asymptotic_ok:
        text += f" (an asymptotic value; with {f.n_blocks} datasets treat it as a rough guide)"
    return text + f". Groups not told apart: {groups}."


def verdict(analysis: Analysis) -> list[str]:
    """The verdict sentences: one across datasets, then one per dataset."""
    out = [s for s in [overall_sentence(analysis)] if s]
    for d in analysis.run.suite.datasets:
        s = dataset_sentence(analysis, d.name)
        if s:
            out.append(s)
    return out
