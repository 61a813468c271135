"""A run folder summarised: its scores ranked, ``summary.csv`` and ``ranking.md`` written, cautions stated."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ..config import CellStatus, is_failure
from ..run.folder import RunFolder
from ..suite import Suite
from .heldout import heldout_markdown, with_gaps
from .rank import Ranking, rank_run, resolve_rank_by
from .tables import ranking_markdown

#: The plain sentence every neighbour-based embedding gets (t-SNE pictures mislead about sizes and gaps).
NEIGHBOUR_CAUTION = (
    "In neighbour-based embeddings ({names}) the sizes of clusters and the gaps between them "
    "carry little meaning; judge them by the neighbourhood measures, not by the picture."
)


@dataclass
class RunSummary:
    """A finished run, ranked (all of it is also in its folder).

    Attributes
    ----------
    folder : RunFolder
        The run folder.
    suite : Suite
        The suite that was run.
    scores : DataFrame
        A row per cell.
    ranking : Ranking
        Seed aggregates and ranks (``ranking.ranked`` is ``summary.csv``).
    counts : dict
        Number of cells per status.
    notes : list of str
        Plain sentences worth reading next to the numbers.
    seconds : float
        Wall time of the run (0 when summarised from a folder).
    """

    folder: RunFolder
    suite: Suite
    scores: pd.DataFrame
    ranking: Ranking
    counts: dict[str, int] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    seconds: float = 0.0

    @property
    def run_dir(self) -> Path:
        """The run folder's path."""
        return self.folder.path

    @property
    def summary(self) -> pd.DataFrame:
        """Every configuration with its seed aggregates and ranks (``summary.csv``)."""
        return self.ranking.ranked

    @property
    def overall(self) -> pd.DataFrame:
        """The ranking across datasets."""
        return self.ranking.overall

    @property
    def rank_by(self) -> dict[str, float]:
        """Measure column to weight, as ranked."""
        return self.ranking.rank_by

    @property
    def failed(self) -> int:
        """Cells that did not finish ok (skipped cells not counted)."""
        return sum(v for k, v in self.counts.items() if is_failure(k))


def run_notes(suite: Suite, scores: pd.DataFrame) -> list[str]:
    """Plain sentences that keep a reader from being misled by the tables."""
    notes = []
    if suite.neighbour_methods:
        notes.append(NEIGHBOUR_CAUTION.format(names=", ".join(suite.neighbour_methods)))
    if "estimated" in scores and scores["estimated"].fillna("").str.len().gt(0).any():
        notes.append(
            "Some values are estimates from sampled pairs or query points; the bounds of their 95% "
            "intervals (Wilson score intervals for query points, jackknife for pairs) are in the "
            "*_ci_low and *_ci_high columns of scores.csv."
        )
    skipped = scores[scores["status"] == CellStatus.SKIPPED]
    for (_, method), group in skipped.groupby(["dataset", "method"], sort=False):
        notes.append(f"Skipped {method} on {group['dataset'].iloc[0]}: {group['error'].iloc[0]}")
    return notes


def rank_folder(folder: RunFolder, suite: Suite | None = None, *, alpha: float = 0.05) -> RunSummary:
    """Rank a run folder's scores (nothing is written)."""
    suite = suite or folder.suite
    scores = folder.scores
    rank_by = resolve_rank_by(suite.scoring.rank_by, suite.scoring.ks)
    ranking = rank_run(scores, rank_by, suite.gridded_methods, alpha=alpha)
    counts = {str(k): int(v) for k, v in scores["status"].value_counts().items()}
    return RunSummary(folder, suite, scores, ranking, counts, run_notes(suite, scores))


def summarise(folder: RunFolder, suite: Suite | None = None) -> RunSummary:
    """Rank a run folder and write ``summary.csv`` and ``ranking.md`` into it.

    Parameters
    ----------
    folder : RunFolder
    suite : Suite, optional
        The suite as run (default: the folder's ``suite.yaml``).

    Returns
    -------
    RunSummary
    """
    suite = suite or folder.suite
    summary = rank_folder(folder, suite)
    table = with_gaps(summary.ranking.ranked.drop(columns=["tuned"]), summary.scores)
    folder.write_table("summary.csv", table)
    text = ranking_markdown(suite.name, summary.ranking, suite.gridded_methods, summary.notes)
    held = heldout_markdown(table, suite.scoring.ks[0])
    folder.write_text("ranking.md", text + ("\n" + held if held else ""))
    return summary
