"""Everything a report shows, computed once from a run folder.

The report's tables, figures and sentences all read one :class:`Analysis`, so
they cannot disagree with each other.
"""
from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..methods import get_method_spec
from ..pipeline import run_notes
from ..rank import CONFIG, higher_is_better, measure_columns, rank_within_datasets, resolve_rank_by, stem
from ..results import Run, load_run
from ..stats import (
    FriedmanResult,
    critical_difference,
    embedding_stability,
    friedman_test,
    indistinct_groups,
    pareto_front,
    rank_blocks,
    seed_statistics,
)

log = logging.getLogger(__name__)

#: Measure columns that describe cost, not quality; shown apart from the quality measures.
COST_COLUMNS = ("fit_seconds", "fit_peak_mb")


@dataclass
class Analysis:
    """The numbers behind a report.

    Attributes
    ----------
    run : Run
        The run folder read back.
    rank_by : dict
        Measure column to weight, as ranked.
    measures : list of str
        Quality measure columns present in the run (cost columns left out).
    ranked : DataFrame
        Every configuration (grid points included) per dataset: mean, ``_sd``, ``_lo``,
        ``_hi`` per measure, ranks within the dataset, ``mean_rank``, ``place``,
        ``pareto`` (on the quality-vs-fit-time front of its dataset) and ``tuned``.
    tuned : DataFrame
        One row per dataset x method: the grid point with the best mean rank on that
        dataset, ranked again among methods.  ``tuned`` is true where the method had
        more than one grid point (its row was chosen after seeing the scores).
    overall : DataFrame
        ``method, datasets, mean_rank, params, friedman_rank, place`` (``params``: the grid
        point used, per dataset when it differs).
    friedman : FriedmanResult or None
        The test over datasets, when it can be run.
    friedman_methods : list of str
        Methods in the order of ``friedman.mean_ranks``.
    cd : float or None
        Nemenyi critical difference of mean ranks at ``alpha``.
    groups : list of tuple of str
        Methods not significantly different from each other (best first).
    stability : DataFrame
        Per configuration: ``knn_overlap``, ``procrustes``, ``pairs``, ``sampled``.
    quality : str
        What the Pareto front trades against fit time (``mean_rank`` or a measure column).
    notes : list of str
        Cautions and facts worth reading beside the numbers.
    estimated : dict
        ``(dataset, method, params)`` to the set of measure columns that were estimated.
    """

    run: Run
    rank_by: dict[str, float]
    measures: list[str]
    ranked: pd.DataFrame
    tuned: pd.DataFrame
    overall: pd.DataFrame
    friedman: FriedmanResult | None
    friedman_methods: list[str]
    cd: float | None
    groups: list[tuple[str, ...]]
    stability: pd.DataFrame
    quality: str
    alpha: float
    notes: list[str] = field(default_factory=list)
    estimated: dict[tuple[str, str, str], set[str]] = field(default_factory=dict)

    @property
    def neighbour_methods(self) -> list[str]:
        """Methods of the neighbour family (t-SNE and kin) in this run."""
        return sorted({m.name for m in self.run.suite.methods
                       if get_method_spec(m.use).family == "neighbour"})

    @property
    def gridded_methods(self) -> set[str]:
        """Methods run over more than one grid point."""
        return {m.name for m in self.run.suite.methods if len(m.grid_points()) > 1}

    def first_ok_key(self, dataset: str, method: str, params: str) -> str | None:
        """Key of the lowest-seed ok cell of a configuration (the one figures show)."""
        s = self.run.scores
        rows = s[(s.dataset == dataset) & (s.method == method) & (s.params == params) & (s.status == "ok")]
        return None if rows.empty else str(rows.sort_values("seed")["key"].iloc[0])


def analyse(run_dir: str | Path, *, quality: str = "mean_rank", alpha: float = 0.05,
            stability: bool = True) -> Analysis:
    """Read a run folder and compute every number of its report.

    Parameters
    ----------
    run_dir : str or Path
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
    run = load_run(run_dir)
    suite = run.suite
    scores = run.scores
    rank_by = resolve_rank_by(suite.scoring.rank_by, suite.scoring.ks)
    cols = measure_columns(scores)
    measures = [c for c in cols if c not in COST_COLUMNS]
    if quality != "mean_rank" and quality not in cols:
        raise InputError("quality", f"expected 'mean_rank' or one of the run's measures "
                                    f"({', '.join(cols)}), got {quality!r}")
    described = seed_statistics(scores, cols, level=0.95)
    summary = _with_counts(scores, described)
    ranked = rank_within_datasets(summary, rank_by)
    gridded = {m.name for m in suite.methods if len(m.grid_points()) > 1}
    ranked["tuned"] = ranked["method"].isin(gridded)
    ranked["pareto"] = _fronts(ranked, quality)
    tuned = _tuned(ranked, rank_by, gridded)
    friedman, methods, cd, groups, overall, note = _across(tuned, alpha)
    stab = _stability(run, suite.scoring.ks[0]) if stability else pd.DataFrame(columns=CONFIG)
    notes = list(run_notes(suite, scores))
    if note:
        log.info("%s", note)
        notes.append(note)
    if gridded:
        notes.append("Methods run over a grid (" + ", ".join(sorted(gridded)) + ") are compared at "
                     "their best grid point per dataset, marked 'tuned': that point was picked after "
                     "seeing the scores, so its numbers lean optimistic.")
    return Analysis(run, rank_by, measures, ranked, tuned, overall, friedman, methods, cd, groups, stab,
                    quality, alpha, notes, _estimated(scores))


def _with_counts(scores: pd.DataFrame, described: pd.DataFrame) -> pd.DataFrame:
    counts = scores.assign(_ok=scores["status"].eq("ok"),
                           _bad=~scores["status"].isin(["ok", "skipped"]))
    counts = counts.groupby(CONFIG, sort=False)[["_ok", "_bad"]].sum().rename(
        columns={"_ok": "seeds_ok", "_bad": "seeds_failed"}).reset_index()
    out = counts.merge(described.drop(columns=["seeds"], errors="ignore"), on=CONFIG, how="left")
    return out


def _fronts(ranked: pd.DataFrame, quality: str) -> pd.Series:
    flags = pd.Series(False, index=ranked.index)
    better_high = quality != "mean_rank" and higher_is_better(quality)
    for _, group in ranked.groupby("dataset", sort=False):
        if quality not in group or "fit_seconds" not in group:
            continue
        front = pareto_front(group[quality].to_numpy(float), group["fit_seconds"].to_numpy(float),
                             higher_is_better=better_high)
        flags.loc[group.index] = front
    return flags


def _tuned(ranked: pd.DataFrame, rank_by: dict[str, float], gridded: set[str]) -> pd.DataFrame:
    ok = ranked.dropna(subset=["mean_rank"])
    if ok.empty:
        return ok.copy()
    best = ok.sort_values(["mean_rank"], kind="stable").groupby(["dataset", "method"], sort=False).head(1)
    keep = [c for c in best.columns if not c.startswith("rank_") and c not in ("mean_rank", "place", "pareto")]
    again = rank_within_datasets(best[keep].reset_index(drop=True), rank_by)
    again["tuned"] = again["method"].isin(gridded)
    return again


def _across(tuned: pd.DataFrame, alpha: float):
    """Overall table, Friedman test, critical difference and groups over the tuned points."""
    if tuned.empty:
        return None, [], None, [], pd.DataFrame(), "No configuration finished, so nothing is ranked."
    table = tuned.pivot_table(index="dataset", columns="method", values="mean_rank", sort=False)
    methods_all = list(tuned.drop_duplicates("method")["method"])
    table = table.reindex(columns=methods_all)
    complete = table.dropna(axis=0, how="any")
    note = ""
    if len(complete) < len(table):
        dropped = [d for d in table.index if d not in complete.index]
        note = ("The test across datasets leaves out " + ", ".join(dropped) +
                ": not every method finished there.")
    overall = (tuned.groupby("method", sort=False)
               .agg(datasets=("mean_rank", "count"), mean_rank=("mean_rank", "mean"))
               .reset_index())
    overall["params"] = overall["method"].map(
        {m: _params_text(g) for m, g in tuned.groupby("method", sort=False)})
    friedman, cd, groups = None, None, []
    if complete.shape[0] >= 2 and complete.shape[1] >= 3:
        ranks = rank_blocks(complete.to_numpy(float), higher_is_better=False)
        friedman = friedman_test(ranks)
        cd = critical_difference(complete.shape[1], complete.shape[0], alpha)
        names = list(complete.columns)
        groups = [tuple(names[i] for i in g) for g in indistinct_groups(friedman.mean_ranks, cd)]
        overall["friedman_rank"] = overall["method"].map(dict(zip(names, friedman.mean_ranks)))
        methods = names
    else:
        methods = []
        extra = (f"The Friedman test needs at least 2 datasets and 3 methods with complete results; "
                 f"this run has {complete.shape[0]} and {complete.shape[1]}, so no test of "
                 f"significance is made.")
        note = f"{note} {extra}".strip()
        overall["friedman_rank"] = np.nan
    overall["place"] = overall["mean_rank"].rank(method="min")
    overall = overall.sort_values("mean_rank", kind="stable").reset_index(drop=True)
    return friedman, methods, cd, groups, overall, note


def _params_text(group: pd.DataFrame) -> str:
    """The parameters a method used: one text when every dataset used the same, else per dataset."""
    values = list(dict.fromkeys(group["params"]))
    if len(values) == 1:
        return str(values[0])
    return "; ".join(f"{d}: {p}" for d, p in zip(group["dataset"], group["params"]))


def _stability(run: Run, k: int) -> pd.DataFrame:
    ok = run.scores[run.scores["status"] == "ok"]
    rows = []
    for key, group in ok.groupby(CONFIG, sort=False):
        embs = [e for e in (run.embedding(k_) for k_ in group.sort_values("seed")["key"]) if e is not None]
        row = dict(zip(CONFIG, key))
        if len(embs) >= 2 and k < embs[0].shape[0]:
            st = embedding_stability(embs, k)
            row.update(knn_overlap=st.knn_overlap, procrustes=st.procrustes, pairs=st.pairs,
                       sampled=st.sampled)
        else:
            row.update(knn_overlap=np.nan, procrustes=np.nan, pairs=0, sampled=False)
        rows.append(row)
    return pd.DataFrame(rows, columns=CONFIG + ["knn_overlap", "procrustes", "pairs", "sampled"])


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
    return column in names or stem(column) in names
