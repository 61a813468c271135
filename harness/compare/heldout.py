"""The generalisation gap: in-sample minus held-out value of each measure, and its Markdown section."""

from __future__ import annotations

import pandas as pd

from ..metrics import HELDOUT_PREFIX
from ..text import markdown_table, number

#: Prefix of a generalisation-gap column (``gap_trustworthiness@10``).
GAP_PREFIX = "gap_"
#: What a large gap means, said once wherever gaps are shown.
GAP_SENTENCE = (
    "The gap is the in-sample value minus the held-out value of a measure: a large gap means the "
    "method keeps the structure of the points it was fitted on but does not carry it to new points "
    "(for measures where lower is better, such as stress, a large negative gap means the same)."
)
_KEYS = ["dataset", "method", "params"]
#: Suffixes of the seed-spread columns beside a mean (the gap is of means only).
_SPREAD_SUFFIXES = ("_sd", "_lo", "_hi")


def with_gaps(ranked: pd.DataFrame, scores: pd.DataFrame) -> pd.DataFrame:
    """``ranked`` plus ``gap_<measure>`` columns and the ``out_of_sample`` map of each configuration.

    Unchanged when the run has no held-out values.  A configuration whose
    method has no out-of-sample map has empty held-out and gap columns and the
    map ``none``.
    """
    pairs = [
        c
        for c in ranked.columns
        if f"{HELDOUT_PREFIX}{c}" in ranked.columns and not c.endswith(_SPREAD_SUFFIXES)
    ]
    if not pairs or "out_of_sample" not in scores:
        return ranked
    out = ranked.copy()
    for c in pairs:
        out[f"{GAP_PREFIX}{c}"] = out[c] - out[f"{HELDOUT_PREFIX}{c}"]
    ok = scores[scores["status"] == "ok"]
    maps = ok.groupby(_KEYS, sort=False)["out_of_sample"].agg(lambda s: "/".join(sorted(set(s.dropna()))))
    reasons = ok.groupby(_KEYS, sort=False)["heldout_reason"].agg(
        lambda s: "; ".join(sorted({r for r in s.dropna() if r}))
    )
    extra = pd.DataFrame({"out_of_sample": maps, "heldout_reason": reasons}).reset_index()
    return out.merge(extra, on=_KEYS, how="left")


def best_generalisers(table: pd.DataFrame, k: int) -> list[str]:
    """One sentence per dataset: the configuration whose new points keep their neighbourhoods best.

    Judged by held-out trustworthiness at ``k`` (mean over seeds); configurations without an
    out-of-sample map take no part.
    """
    column = f"{HELDOUT_PREFIX}trustworthiness@{k}"
    if column not in table:
        return []
    out = []
    for dataset, group in table.groupby("dataset", sort=False):
        placed = group.dropna(subset=[column])
        if placed.empty:
            continue
        best = placed.iloc[int(placed[column].to_numpy().argmax())]
        gap = best.get(f"{GAP_PREFIX}trustworthiness@{k}")
        gap_text = "" if gap is None or pd.isna(gap) else f", gap {gap:+.3f}"
        out.append(
            f"On {dataset}, {best['method']} places new points best (held-out trustworthiness@{k} "
            f"{best[column]:.3f}{gap_text})."
        )
    return out


def heldout_markdown(summary: pd.DataFrame, k: int) -> str:
    """The held-out section of ``ranking.md``: map, in-sample, held-out, gap and placement at one k."""
    if f"{GAP_PREFIX}trustworthiness@{k}" not in summary:
        return ""
    t, p, a = f"trustworthiness@{k}", f"heldout_placement@{k}", f"heldout_knn_accuracy@{k}"
    headers = ["dataset", "method", "params", "out-of-sample map", f"{t} in-sample", "held-out", "gap", p]
    with_labels = a in summary
    if with_labels:
        headers.append(a)
    rows = []
    for _, r in summary.iterrows():
        reason = r.get("heldout_reason")
        shown = r.get("out_of_sample") or "none"
        if isinstance(reason, str) and reason:
            shown = f"{shown} ({reason})"
        row = [r["dataset"], r["method"], r["params"], shown, number(r[t]), number(r[f"heldout_{t}"])]
        row += [number(r[f"{GAP_PREFIX}{t}"]), number(r[p])]
        if with_labels:
            row.append(number(r[a]))
        rows.append(row)
    right = [False] * 4 + [True] * (len(headers) - 4)
    best = " ".join(best_generalisers(summary, k))
    parts = ["## Held-out points", "", GAP_SENTENCE, "", markdown_table(rows, headers, right), ""]
    return "\n".join([*parts, best, ""] if best else parts)
