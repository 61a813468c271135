"""Seed aggregation and ranks: scores in, plain tables out."""
from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from .metrics import MEASURES
from .store import ID_COLUMNS, INFO_COLUMNS

CONFIG = ["dataset", "method", "params"]


def measure_columns(scores: pd.DataFrame) -> list[str]:
    """Measure columns of a scores table (values, not interval half-widths)."""
    skip = set(ID_COLUMNS) | set(INFO_COLUMNS) - {"fit_seconds", "fit_peak_mb"}
    return [c for c in scores.columns if c not in skip and not c.endswith("_ci95")
            and stem(c) in MEASURES]


def stem(column: str) -> str:
    """``trustworthiness@10`` -> ``trustworthiness``."""
    return column.split("@", 1)[0]


def higher_is_better(column: str) -> bool:
    """Direction of a measure column."""
    return MEASURES[stem(column)].higher_is_better


def summarise(scores: pd.DataFrame) -> pd.DataFrame:
    """Mean and standard deviation across seeds per dataset x method x params.

    Parameters
    ----------
    scores : DataFrame
        A row per cell (see :func:`harness.store.scores_frame`).

    Returns
    -------
    DataFrame
        Columns ``dataset, method, params, seeds_ok, seeds_failed``, then for each
        measure ``m`` the mean ``m`` and the sample standard deviation ``m_sd``
        over the seeds whose cell finished ``ok``.
    """
    cols = measure_columns(scores)
    keys = scores[CONFIG].drop_duplicates()
    ok = scores[scores["status"] == "ok"]
    counts = scores.assign(_ok=scores["status"].eq("ok"), _bad=~scores["status"].isin(["ok", "skipped"]))
    counts = counts.groupby(CONFIG, sort=False)[["_ok", "_bad"]].sum().rename(
        columns={"_ok": "seeds_ok", "_bad": "seeds_failed"}).reset_index()
    out = keys.merge(counts, on=CONFIG, how="left")
    if cols and len(ok):
        grouped = ok.groupby(CONFIG, sort=False)[cols]
        means = grouped.mean()
        sds = grouped.std(ddof=1).add_suffix("_sd")
        stats = pd.concat([means, sds], axis=1)
        ordered = [c for m in cols for c in (m, f"{m}_sd")]
        out = out.merge(stats[ordered].reset_index(), on=CONFIG, how="left")
    return out.reset_index(drop=True)


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
        ``summary`` with ``rank_<measure>`` columns, ``mean_rank`` and ``place``.
    """
    parts = []
    for _, group in summary.groupby("dataset", sort=False):
        group = group.copy()
        total = pd.Series(0.0, index=group.index)
        weight = pd.Series(0.0, index=group.index)
        for col, w in rank_by.items():
            if col not in group or group[col].isna().all():
                continue
            r = group[col].rank(method="average", ascending=not higher_is_better(col))
            group[f"rank_{col}"] = r
            total += r.fillna(0) * w
            weight += r.notna() * w
        group["mean_rank"] = (total / weight.replace(0, np.nan))
        group["place"] = group["mean_rank"].rank(method="min")
        parts.append(group.sort_values(["mean_rank"], na_position="last", kind="stable"))
    return pd.concat(parts, ignore_index=True) if parts else summary.assign(mean_rank=[], place=[])


def overall_ranking(ranked: pd.DataFrame) -> pd.DataFrame:
    """Mean of the per-dataset mean ranks for each method x params, best first.

    Returns
    -------
    DataFrame
        ``method, params, datasets, mean_rank, place`` (``datasets`` counts the
        datasets where the configuration was ranked).
    """
    ok = ranked.dropna(subset=["mean_rank"])
    out = ok.groupby(["method", "params"], sort=False)["mean_rank"].agg(["count", "mean"]).reset_index()
    out.columns = ["method", "params", "datasets", "mean_rank"]
    out["place"] = out["mean_rank"].rank(method="min")
    return out.sort_values("mean_rank", kind="stable").reset_index(drop=True)
