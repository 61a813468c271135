"""Seed aggregation and ranks against SciPy / NumPy."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import rankdata

from harness.compare.aggregate import aggregate as summarise
from harness.compare.rank import rank_run, rank_within_datasets, resolve_rank_by


@pytest.fixture
def scores():
    rng = np.random.default_rng(3)
    rows = []
    for ds in ("a", "b"):
        for method in ("m1", "m2", "m3", "m4"):
            for seed in range(4):
                rows.append(
                    {
                        "dataset": ds,
                        "method": method,
                        "params": "-",
                        "seed": seed,
                        "status": "ok",
                        "trustworthiness@10": rng.uniform(0.7, 1.0),
                        "stress": rng.uniform(0, 1),
                        "fit_seconds": rng.uniform(0.1, 1),
                    }
                )
    frame = pd.DataFrame(rows)
    # a tie on trustworthiness for dataset a: m1 and m2 equal in every seed
    tie = (frame.dataset == "a") & (frame.method == "m2")
    frame.loc[tie, "trustworthiness@10"] = frame.loc[
        (frame.dataset == "a") & (frame.method == "m1"), "trustworthiness@10"
    ].to_numpy()
    return frame


def test_summary_matches_numpy(scores):
    s = summarise(scores)
    row = s[(s.dataset == "b") & (s.method == "m3")].iloc[0]
    raw = scores[(scores.dataset == "b") & (scores.method == "m3")]["stress"].to_numpy()
    # NumPy's mean and sample standard deviation (ddof=1)
    assert row["stress"] == pytest.approx(raw.mean(), abs=1e-12)
    assert row["stress_sd"] == pytest.approx(raw.std(ddof=1), abs=1e-12)
    assert row["seeds_ok"] == 4


def test_ranks_average_ties_like_scipy(scores):
    ranked = rank_within_datasets(summarise(scores), {"trustworthiness@10": 1.0})
    a = ranked[ranked.dataset == "a"].set_index("method")
    # scipy.stats.rankdata(method="average") on the negated values (higher is better)
    expected = rankdata(-a["trustworthiness@10"].to_numpy(), method="average")
    np.testing.assert_allclose(a["rank_trustworthiness@10"].to_numpy(), expected)
    assert a.loc["m1", "rank_trustworthiness@10"] == a.loc["m2", "rank_trustworthiness@10"]


def test_lower_is_better_for_stress(scores):
    ranked = rank_within_datasets(summarise(scores), {"stress": 1.0})
    b = ranked[ranked.dataset == "b"]
    assert b.iloc[0]["stress"] == b["stress"].min()
    assert b.iloc[0]["place"] == 1


def test_weighted_mean_rank_and_overall(scores):
    rank_by = {"trustworthiness@10": 2.0, "stress": 1.0}
    ranked = rank_within_datasets(summarise(scores), rank_by)
    r = ranked.iloc[0]
    assert r["mean_rank"] == pytest.approx((2 * r["rank_trustworthiness@10"] + r["rank_stress"]) / 3)
    overall = rank_run(scores, rank_by, set()).overall
    m1 = ranked[ranked.method == "m1"]["mean_rank"].mean()
    assert overall.set_index("method").loc["m1", "mean_rank"] == pytest.approx(m1)
    assert list(overall["mean_rank"]) == sorted(overall["mean_rank"])


def test_failed_seeds_are_counted_not_averaged(scores):
    scores.loc[0, "status"] = "failed"
    scores.loc[0, "trustworthiness@10"] = np.nan
    s = summarise(scores)
    row = s[(s.dataset == "a") & (s.method == "m1")].iloc[0]
    assert (row["seeds_ok"], row["seeds_failed"]) == (3, 1)


def test_plain_measure_names_use_the_first_k():
    assert resolve_rank_by({"trustworthiness": 1, "stress": 2}, (30, 10)) == {
        "trustworthiness@30": 1.0,
        "stress": 2.0,
    }
