"""Ranks within each dataset and across datasets, with the rank test that goes with them.

:func:`rank_run` is the one function that ranks a run: the terminal table,
``summary.csv``, ``ranking.md`` and the report all take its :class:`Ranking`.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import pandas as pd

from ..metrics import MEASURES, higher_is_better, measure_stem
from .aggregate import aggregate
from .stats import FriedmanResult, critical_difference, friedman_test, indistinct_groups, rank_blocks


@dataclass
class Ranking:
    """A run ranked.

    Attributes
    ----------
    rank_by : dict
        Measure column to weight, as ranked.
    ranked : DataFrame
        Every configuration (grid points included) per dataset: the columns of
        :func:`~harness.compare.aggregate.aggregate`, ``rank_<measure>`` per
        ranked measure, ``mean_rank``, ``place`` and ``tuned``.
    tuned : DataFrame
        One row per dataset x method: its grid point with the best mean rank on
        that dataset, ranked again among methods (``tuned`` marks methods run
        over a grid: that point was chosen after seeing the scores).
    overall : DataFrame
        ``place, method, params, datasets, mean_rank, friedman_rank`` across
        datasets, best first (``params``: the grid point used, per dataset when
        it differs).
    friedman : FriedmanResult or None
        The test over datasets, when it can be run.
    friedman_methods : list of str
        Methods in the order of ``friedman.mean_ranks``.
    cd : float or None
        Nemenyi critical difference of mean ranks at ``alpha``.
    groups : list of tuple of str
        Methods the test cannot tell apart (best first).
    alpha : float
    notes : list of str
        Why a test was not made, or what it left out.
    """

    rank_by: dict[str, float]
    ranked: pd.DataFrame
    tuned: pd.DataFrame
    overall: pd.DataFrame
    friedman: FriedmanResult | None = None
    friedman_methods: list[str] = field(default_factory=list)
    cd: float | None = None
    groups: list[tuple[str, ...]] = field(default_factory=list)
    alpha: float = 0.05
    notes: list[str] = field(default_factory=list)


def resolve_rank_by(rank_by: Mapping[str, float], ks: tuple[int, ...] | list[int]) -> dict[str, float]:
    """Turn suite measure names into columns: per-k measures without ``@k`` use the first k."""
    out = {}
    for name, weight in rank_by.items():
        if "@" not in name and MEASURES[name].per_k:
            name = f"{name}@{ks[0]}"
        out[name] = float(weight)
    return out


def rank_within_datasets(summary: pd.DataFrame, rank_by: Mapping[str, float]) -> pd.DataFrame:
    """Rank configurations within each dataset.

    For every measure in ``rank_by`` the configurations of a dataset are ranked
    (1 = best, ties get the average rank, as ``scipy.stats.rankdata``); the
    ``mean_rank`` is the weighted mean over the measures that dataset has, and
    ``place`` orders it.  Measures a dataset lacks (e.g. label measures on
    unlabelled data) are left out for that dataset.

    Returns
    -------
    DataFrame
        ``summary`` with ``rank_<measure>`` columns, ``mean_rank`` and ``place``,
        each dataset's rows best first.
    """
    parts = []
    for _, group in summary.groupby("dataset", sort=False):
        group = group.copy()
        total = pd.Series(0.0, index=group.index)
        weight = pd.Series(0.0, index=group.index)
        for col, w in rank_by.items():
            if col not in group or group[col].isna().all():
                continue
            # a method that cannot place new points has no held-out value: it ranks last there
            missing: Literal["bottom", "keep"] = (
                "bottom" if MEASURES[measure_stem(col)].scope == "heldout" else "keep"
            )
            r = group[col].rank(method="average", ascending=not higher_is_better(col), na_option=missing)
            group[f"rank_{col}"] = r
            total += r.fillna(0) * w
            weight += r.notna() * w
        group["mean_rank"] = total / weight.replace(0, np.nan)
        group["place"] = group["mean_rank"].rank(method="min")
        parts.append(group.sort_values(["mean_rank"], na_position="last", kind="stable"))
    return pd.concat(parts, ignore_index=True) if parts else summary.assign(mean_rank=[], place=[])


def best_points(ranked: pd.DataFrame, rank_by: Mapping[str, float], gridded: set[str]) -> pd.DataFrame:
    """Each method at its best grid point per dataset, ranked again among methods."""
    ok = ranked.dropna(subset=["mean_rank"])
    if ok.empty:
        return ok.assign(tuned=pd.Series(dtype=bool))
    best = ok.sort_values(["mean_rank"], kind="stable").groupby(["dataset", "method"], sort=False).head(1)
    keep = [c for c in best.columns if not c.startswith("rank_") and c not in ("mean_rank", "place", "tuned")]
    again = rank_within_datasets(best[keep].reset_index(drop=True), rank_by)
    again["tuned"] = again["method"].isin(gridded)
    return again


def rank_run(
    scores: pd.DataFrame, rank_by: Mapping[str, float], gridded: set[str], *, alpha: float = 0.05
) -> Ranking:
    """Aggregate seeds, rank within datasets, then across datasets with the Friedman test.

    Parameters
    ----------
    scores : DataFrame
        A row per cell.
    rank_by : mapping
        Measure column (``@k`` filled in, see :func:`resolve_rank_by`) to weight.
    gridded : set of str
        Methods run over more than one grid point.
    alpha : float
        Level of the Nemenyi critical difference.

    Returns
    -------
    Ranking
    """
    rank_by = dict(rank_by)
    ranked = rank_within_datasets(aggregate(scores), rank_by)
    ranked["tuned"] = ranked["method"].isin(gridded)
    tuned = best_points(ranked, rank_by, gridded)
    ranking = Ranking(rank_by, ranked, tuned, _overall(tuned), alpha=alpha)
    _test_across(ranking)
    return ranking


def _overall(tuned: pd.DataFrame) -> pd.DataFrame:
    columns = ["place", "method", "params", "datasets", "mean_rank", "friedman_rank"]
    if tuned.empty:
        return pd.DataFrame(columns=columns)
    overall = (
        tuned.groupby("method", sort=False)
        .agg(datasets=("mean_rank", "count"), mean_rank=("mean_rank", "mean"))
        .reset_index()
    )
    overall["params"] = overall["method"].map(
        {m: _params_used(g) for m, g in tuned.groupby("method", sort=False)}
    )
    overall["friedman_rank"] = np.nan
    overall["place"] = overall["mean_rank"].rank(method="min")
    return overall.sort_values("mean_rank", kind="stable").reset_index(drop=True)[columns]


def _params_used(group: pd.DataFrame) -> str:
    """The parameters a method used: one text when every dataset used the same, else per dataset."""
    values = list(dict.fromkeys(group["params"]))
    if len(values) == 1:
        return str(values[0])
    return "; ".join(f"{d}: {p}" for d, p in zip(group["dataset"], group["params"]))


def _test_across(ranking: Ranking) -> None:
    """The Friedman test, critical difference and groups over the datasets where every method finished."""
    tuned = ranking.tuned
    if tuned.empty:
        ranking.notes.append("No configuration finished, so nothing is ranked.")
        return
    table = tuned.pivot_table(index="dataset", columns="method", values="mean_rank", sort=False)
    table = table.reindex(columns=list(tuned.drop_duplicates("method")["method"]))
    complete = table.dropna(axis=0, how="any")
    if len(complete) < len(table):
        dropped = [d for d in table.index if d not in complete.index]
        ranking.notes.append(
            "The test across datasets leaves out " + ", ".join(dropped) + ": not every method finished there."
        )
    if complete.shape[0] < 2 or complete.shape[1] < 3:
        ranking.notes.append(
            f"The Friedman test needs at least 2 datasets and 3 methods with complete results; this run has "
            f"{complete.shape[0]} and {complete.shape[1]}, so no test of significance is made."
        )
        return
    ranks = rank_blocks(complete.to_numpy(float), higher_is_better=False)
    ranking.friedman = friedman_test(ranks)
    ranking.cd = critical_difference(complete.shape[1], complete.shape[0], ranking.alpha)
    names = list(complete.columns)
    ranking.friedman_methods = names
    ranking.groups = [
        tuple(names[i] for i in g) for g in indistinct_groups(ranking.friedman.mean_ranks, ranking.cd)
    ]
    ranking.overall["friedman_rank"] = ranking.overall["method"].map(
        dict(zip(names, ranking.friedman.mean_ranks))
    )
