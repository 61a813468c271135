"""Everything a report shows, computed once from a run folder.

The report's tables, figures and sentences all read one :class:`Analysis`,
which takes its seed aggregates and ranks from :func:`harness.compare.rank_folder`
(the same numbers as ``summary.csv`` and the terminal), so they cannot disagree.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..compare import CONFIG, Ranking, measure_columns, rank_folder
from ..compare.aggregate import COST_COLUMNS
from ..compare.stats import FriedmanResult, embedding_stability, pareto_front
from ..config import CellStatus
from ..errors import InputError
from ..metrics import higher_is_better, measure_stem
from ..run.folder import RunFolder
from ..text import method_label

log = logging.getLogger(__name__)


@dataclass
class Analysis:
    """The numbers behind a report.

    Attributes
    ----------
    run : RunFolder
        The run folder.
    ranking : Ranking
        Seed aggregates and ranks; ``ranking.ranked`` also has ``pareto`` (on
        the quality-vs-fit-time front of its dataset).
    measures : list of str
        Quality measure columns present in the run (cost columns left out).
    stability : DataFrame
        Per configuration: ``knn_overlap``, ``procrustes``, ``pairs``, ``sampled``.
    quality : str
        What the Pareto front trades against fit time (``mean_rank`` or a measure column).
    notes : list of str
        Cautions and facts worth reading beside the numbers.
    estimated : dict
        ``(dataset, method, params)`` to the set of measure columns that were estimated.
    """

    run: RunFolder
    ranking: Ranking
    measures: list[str]
    stability: pd.DataFrame
    quality: str
    notes: list[str] = field(default_factory=list)
    estimated: dict[tuple[str, str, str], set[str]] = field(default_factory=dict)

    @property
    def rank_by(self) -> dict[str, float]:
        """Measure column to weight, as ranked."""
        return self.ranking.rank_by

    @property
    def ranked(self) -> pd.DataFrame:
        """Every configuration per dataset (see :class:`~harness.compare.Ranking`)."""
        return self.ranking.ranked

    @property
    def tuned(self) -> pd.DataFrame:
        """Each method at its best grid point per dataset."""
        return self.ranking.tuned

    @property
    def overall(self) -> pd.DataFrame:
        """The ranking across datasets."""
        return self.ranking.overall

    @property
    def alpha(self) -> float:
        """Level of the rank tests."""
        return self.ranking.alpha

    @property
    def friedman(self) -> FriedmanResult | None:
        """The Friedman test over datasets, when it could be run."""
        return self.ranking.friedman

    @property
    def friedman_methods(self) -> list[str]:
        """Methods in the order of ``friedman.mean_ranks``."""
        return self.ranking.friedman_methods

    @property
    def cd(self) -> float | None:
        """Nemenyi critical difference of mean ranks."""
        return self.ranking.cd

    @property
    def groups(self) -> list[tuple[str, ...]]:
        """Methods the test cannot tell apart (best first)."""
        return self.ranking.groups

    def label(self, method: str) -> str:
        """A method's name as the report shows it (``(tuned)`` when run over a grid)."""
        return method_label(method, method in self.gridded_methods)

    @property
    def gridded_methods(self) -> set[str]:
        """Methods run over more than one grid point."""
        return self.run.suite.gridded_methods

    def first_ok_key(self, dataset: str, method: str, params: str) -> str | None:
        """Key of the lowest-seed ok cell of a configuration (the one figures show)."""
        s = self.run.scores
        rows = s[
            (s.dataset == dataset) & (s.method == method) & (s.params == params) & (s.status == CellStatus.OK)
        ]
        return None if rows.empty else str(rows.sort_values("seed")["key"].iloc[0])


def analyse(
    run_dir: str | Path | RunFolder,
    *,
    quality: str = "mean_rank",
    alpha: float = 0.05,
    stability: bool = True,
) -> Analysis:
    """Read a run folder and compute every number of its report.

    Parameters
    ----------
    run_dir : str, Path or RunFolder
        A run folder written by ``foldbench run``.
    quality : str
        The quality axis of the Pareto front: ``mean_rank`` (the suite's ranking) or a
        measure column such as ``trustworthiness@10``.
    alpha : float
        Level of the Nemenyi critical difference.
    stability : bool
        Compare the seeds' embeddings (reads every stored embedding).

    Returns
    -------
    Analysis
    """
    run = run_dir if isinstance(run_dir, RunFolder) else RunFolder.open(run_dir)
    suite = run.suite
    cols = measure_columns(run.scores)
    if quality != "mean_rank" and quality not in cols:
        raise InputError(
            "quality",
            f"expected 'mean_rank' or one of the run's measures ({', '.join(cols)}), got {quality!r}",
        )
    summary = rank_folder(run, suite, alpha=alpha)
    ranking = summary.ranking
    ranking.ranked["pareto"] = _fronts(ranking.ranked, quality)
    stab = _stability(run, suite.scoring.ks[0]) if stability else pd.DataFrame(columns=CONFIG)
    notes = summary.notes + ranking.notes
    if suite.gridded_methods:
        notes.append(
            "Methods run over a grid (" + ", ".join(sorted(suite.gridded_methods)) + ") are compared at "
            "their best grid point per dataset, marked 'tuned': that point was picked after "
            "seeing the scores, so its numbers lean optimistic."
        )
    return Analysis(
        run, ranking, [c for c in cols if c not in COST_COLUMNS], stab, quality, notes, _estimated(run.scores)
    )


def _fronts(ranked: pd.DataFrame, quality: str) -> pd.Series:
    flags = pd.Series(False, index=ranked.index)
    better_high = quality != "mean_rank" and higher_is_better(quality)
    for _, group in ranked.groupby("dataset", sort=False):
        if quality not in group or "fit_seconds" not in group:
            continue
        front = pareto_front(
            group[quality].to_numpy(float), group["fit_seconds"].to_numpy(float), higher_is_better=better_high
        )
        flags.loc[group.index] = front
    return flags


def _stability(run: RunFolder, k: int) -> pd.DataFrame:
    ok = run.scores[run.scores["status"] == CellStatus.OK]
    rows = []
    for key, group in ok.groupby(CONFIG, sort=False):
        embs = [e for e in (run.embedding(k_) for k_ in group.sort_values("seed")["key"]) if e is not None]
        row = dict(zip(CONFIG, key))
        if len(embs) >= 2 and k < embs[0].shape[0]:
            st = embedding_stability(embs, k)
            row.update(
                knn_overlap=st.knn_overlap, procrustes=st.procrustes, pairs=st.pairs, sampled=st.sampled
            )
        else:
            row.update(knn_overlap=np.nan, procrustes=np.nan, pairs=0, sampled=False)
        rows.append(row)
    return pd.DataFrame(rows, columns=[*CONFIG, "knn_overlap", "procrustes", "pairs", "sampled"])


def _estimated(scores: pd.DataFrame) -> dict[tuple[str, str, str], set[str]]:
    out: dict[tuple[str, str, str], set[str]] = {}
    if "estimated" not in scores:
        return out
    for _, r in scores.iterrows():
        text = r["estimated"] if isinstance(r["estimated"], str) else ""
        names = {n for n in text.split(";") if n}
        if names:
            out.setdefault((r["dataset"], r["method"], r["params"]), set()).update(names)
    return out


def is_estimated(analysis: Analysis, row: pd.Series, column: str) -> bool:
    """Whether any seed of this configuration had ``column`` estimated (sampled)."""
    names = analysis.estimated.get((row["dataset"], row["method"], row["params"]), set())
    return column in names or measure_stem(column) in names
