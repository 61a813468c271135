"""The recommendation: winner, runners-up, separability, rung history, time; its text and ``chosen.yaml``."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from ..text import markdown_table
from .budget import show_seconds
from .pool import Candidate


@dataclass
class RungRecord:
    """What one rung did: its size, who ran, who was kept, who was dropped and why."""

    index: int
    size: int
    seeds: int
    seconds: float
    run_dir: str
    ranking: list[dict[str, Any]]
    kept: list[str]
    dropped: list[tuple[str, str]] = field(default_factory=list)
    budget_dropped: list[tuple[str, str]] = field(default_factory=list)
    carried: list[str] = field(default_factory=list)


@dataclass
class Separation:
    """One measure's one-sided Welch test: is the runner-up worse than the winner over seeds?"""

    measure: str
    winner: float
    runner_up: float
    p_worse: float
    p_better: float
    #: Both sides gave one value for every seed (seed-free fits): a difference is exact, not noise.
    exact: bool = False


@dataclass
class Recommendation:
    """Everything ``choose`` found, as plain values (also in ``recommendation.md`` and ``chosen.yaml``).

    Attributes
    ----------
    winner : str or None
        Name of the chosen candidate (``None`` when nothing finished).
    candidates : dict
        Every candidate by name.
    final : list of dict
        The last completed rung's ranking, best first, with measure values and intervals.
    complete : bool
        Whether the last rung (all the data, every seed) was reached.
    separations : list of Separation
        Winner against runner-up per ranked measure (empty with one seed).
    rungs : list of RungRecord
    weights : dict
        The measure weights the ranks were combined with.
    budget, seconds : float
        The budget and the time spent, in seconds.
    left_out : list of (name, reason)
        Candidates left out of the pool before any rung.
    notes : list of str
    audit : dict or None
        With ``audit=True``: the exhaustive ranking and where the winner stands in it.
    """

    winner: str | None
    candidates: dict[str, Candidate]
    final: list[dict[str, Any]]
    complete: bool
    separations: list[Separation]
    rungs: list[RungRecord]
    weights: dict[str, float]
    care: str
    budget: float
    seconds: float
    left_out: list[tuple[str, str]]
    notes: list[str] = field(default_factory=list)
    out: str = ""
    audit: dict[str, Any] | None = None

    @property
    def runner_up(self) -> str | None:
        """The second of the last completed rung."""
        return self.final[1]["name"] if len(self.final) > 1 else None

    @property
    def separable(self) -> bool | None:
        """Winner better than the runner-up beyond seed noise on some ranked measure and worse on none.

        ``None`` when untested (one seed).  Each side is a one-sided Welch test at 0.05.
        """
        if not self.separations:
            return None
        wins = any(s.p_worse < 0.05 for s in self.separations)
        losses = any(s.p_better < 0.05 for s in self.separations)
        return wins and not losses

    @property
    def budget_dropped(self) -> list[tuple[str, str]]:
        """Every candidate dropped because its predicted time did not fit the budget, with the reason."""
        return [d for r in self.rungs for d in r.budget_dropped]


def _num(v: Any) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "-"
    return f"{v:.3f}" if isinstance(v, float) else str(v)


def recommendation_text(rec: Recommendation) -> str:
    """The recommendation as Markdown (printed, and written to ``recommendation.md``)."""
    lines = ["# Recommendation", ""]
    if rec.winner is None:
        lines += ["No candidate finished a rung; there is nothing to recommend.", ""]
    else:
        what = rec.candidates[rec.winner].describe()
        where = "on all the data with every seed" if rec.complete else "at the largest completed rung"
        lines += [f"Winner: **{rec.winner}** = `{what}`, {where}.", ""]
        if not rec.complete:
            lines += [
                "The budget ran out before the last rung: this is the best answer so far, "
                "not one checked on all the data.",
                "",
            ]
    weights = ", ".join(f"{k} {v:g}" for k, v in rec.weights.items())
    lines += [f"Care: {rec.care}; each measure's rank weighted: {weights}.", ""]
    if "latent_spearman" in rec.weights:
        lines += [
            "The data carry their true latent chart, so the global side is judged against it "
            "(latent_spearman), not against straight-line distances, which a curved manifold does not keep.",
            "",
        ]
    if rec.final:
        cols = list(rec.weights)
        header = ["place", "candidate", "mean rank", *cols]
        rows = []
        for row in rec.final:
            cells = [str(row["place"]), row["name"], _num(row["mean_rank"])]
            for c in cols:
                value, lo, hi = row["measures"].get(c), row["low"].get(c), row["high"].get(c)
                text = _num(value)
                if lo is not None and hi is not None and not (math.isnan(lo) or math.isnan(hi)):
                    text += f" [{lo:.3f}, {hi:.3f}]"
                cells.append(text)
            rows.append(cells)
        lines += ["Finalists (seed means, 95% t interval):", "", markdown_table(rows, header), ""]
        top = rec.final[:2]
        if len(top) == 2 and top[0]["mean_rank"] == top[1]["mean_rank"]:
            lines += [_tie_sentence(rec, top[0], top[1]), ""]
    lines += _separation_lines(rec)
    lines += ["## Rungs", ""]
    for r in rec.rungs:
        lines.append(
            f"- rung {r.index}: {r.size} rows, {r.seeds} seed(s), {len(r.ranking)} ran, "
            f"{len(r.kept)} kept, {show_seconds(r.seconds)}"
        )
        lines += [f"  - dropped {name}: {why}" for name, why in r.dropped]
        lines += [f"  - dropped for budget {name}: {why}" for name, why in r.budget_dropped]
        if r.carried:
            lines.append(f"  - carried (too small to judge them here): {', '.join(r.carried)}")
    lines.append("")
    if rec.left_out:
        lines += ["Left out of the pool:", ""] + [f"- {name}: {why}" for name, why in rec.left_out] + [""]
    share = rec.seconds / rec.budget if rec.budget else math.nan
    lines += [f"Time: {show_seconds(rec.seconds)} of a {show_seconds(rec.budget)} budget ({share:.0%}).", ""]
    if rec.audit:
        a = rec.audit
        lines += [
            "## Audit (every candidate on all the data with every seed)",
            "",
            f"The winner ranks {a['winner_rank']} of {a['count']} in the exhaustive ranking "
            f"(exhaustive best: {a['best']}); exhaustive time {show_seconds(a['seconds'])}, "
            f"choose time {show_seconds(rec.seconds)}.",
            "",
        ]
    lines += [f"Note: {n}" for n in rec.notes]
    return "\n".join(lines).rstrip() + "\n"


def _separation_lines(rec: Recommendation) -> list[str]:
    if rec.winner is None:
        return []
    if rec.runner_up is None:
        return [
            "No runner-up reached the last rung (the others were outranked or dropped for budget), "
            "so the winner is not tested against one.",
            "",
        ]
    if not rec.separations:
        return [f"Winner against runner-up ({rec.runner_up}): not tested (one seed at this rung).", ""]
    parts = [
        f"{s.measure}: winner {s.winner:.4g}, runner-up {s.runner_up:.4g} "
        + (
            "(the same value for every seed on both sides: the difference is exact)"
            if s.exact
            else f"(Welch p runner-up worse = {s.p_worse:.3g}, better = {s.p_better:.3g})"
        )
        for s in rec.separations
    ]
    # "beyond seed noise" only where there is seed noise: seed-free finalists differ exactly
    beyond = "exactly (both are seed-free)" if all(s.exact for s in rec.separations) else "beyond seed noise"
    if rec.separable:
        verdict = f"separable: the runner-up is worse {beyond} on at least one measure, better on none"
    elif any(s.p_worse < 0.05 for s in rec.separations):
        verdict = f"not separable: each is better {beyond} on some measure (they trade off)"
    else:
        verdict = "not separable over seeds: either is defensible on these measures"
    return [f"Winner against runner-up ({rec.runner_up}): {verdict}.", "", *[f"- {p}" for p in parts], ""]


def chosen_suite(
    name: str,
    datasets: Sequence[Mapping[str, Any]],
    finalists: Sequence[Candidate],
    *,
    seeds: Sequence[int],
    dimensions: int,
    ks: Sequence[int],
    rank_by: Mapping[str, float],
) -> str:
    """The YAML of a suite holding the finalists on all the data (for ``foldbench run`` and ``check``)."""
    doc = {
        "name": name,
        "description": "finalists chosen by foldbench choose",
        "seeds": [int(s) for s in seeds],
        "dimensions": int(dimensions),
        "datasets": [dict(d) for d in datasets],
        "methods": [{"use": c.use, "name": c.name, "params": dict(c.params)} for c in finalists],
        "measures": {"k": [int(k) for k in ks], "rank_by": {k: float(v) for k, v in rank_by.items()}},
    }
    return yaml.safe_dump(doc, sort_keys=False)


def write_text_file(path: Path, text: str) -> None:
    """Write one of choose's own text files atomically."""
    from ..run.atomic import write_text

    write_text(path, text)


def _tie_sentence(rec: Recommendation, first: dict[str, Any], second: dict[str, Any]) -> str:
    """Why the first of two finalists with equal mean ranks is first (the rule of ``standings``)."""
    before: dict[str, tuple[int, int]] = {}
    for r in rec.rungs[:-1]:
        for row in r.ranking:
            before[row["name"]] = (int(row["place"]), r.size)
    a, b = before.get(first["name"]), before.get(second["name"])
    if a is not None and b is not None and a[0] != b[0]:
        return (
            "The first two tie on mean rank; the tie goes to the one placed higher where they were "
            f"last judged among more candidates (place {a[0]} against {b[0]}"
            + (f", on {a[1]} rows)." if a[1] == b[1] else f", on {a[1]} and {b[1]} rows).")
        )
    return (
        f"The first two tie on mean rank; the tie goes to the cheaper fit "
        f"({_num(first.get('fit_seconds'))} s against {_num(second.get('fit_seconds'))} s a cell)."
    )
