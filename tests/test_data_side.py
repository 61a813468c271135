"""The data's side of scoring, made once per dataset: same values, checked when read back."""

from __future__ import annotations

import logging

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from scipy.spatial.distance import pdist, squareform

from harness.api import run_suite
from harness.config import Scoring
from harness.datasets import load_dataset
from harness.metrics import prepare_data, score
from harness.metrics._global import average_ranks
from harness.run import dataside

CASES = [
    {},  # all pairs, exact full-range area
    {"pair_sample_above": 100, "n_pairs": 4000},  # sampled pairs and their jackknife
    {"estimate_above": 150, "n_queries": 120},  # sampled query points: the area has no shared rows
]


@given(st.lists(st.integers(0, 6), min_size=2, max_size=60))
@settings(max_examples=60, deadline=None)
def test_average_ranks_are_scipys_with_many_ties(values):
    # Reference: scipy.stats.rankdata(method="average"), the ranks spearmanr correlates.
    a = np.asarray(values, dtype=float)
    np.testing.assert_array_equal(average_ranks(a), stats.rankdata(a, method="average"))


def test_shepard_spearman_is_scipys_spearmanr():
    # Reference: scipy.stats.spearmanr over all pairs (ties broken by average ranks).
    rng = np.random.default_rng(4)
    x = rng.normal(size=(120, 5))
    y = np.round(5 * x[:, :2])  # whole numbers: many tied distances, kept exactly by the centring
    rho = stats.spearmanr(pdist(x), pdist(y)).statistic
    assert score(x, y, ks=[5]).values["shepard_spearman"] == pytest.approx(rho, abs=1e-12)


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("metric", ["euclidean", "precomputed"])
def test_a_prepared_data_side_changes_no_value(case, metric):
    # Plumbing of our own: the same arrays made once or per call give the same numbers, bit for bit.
    rng = np.random.default_rng(1)
    x = rng.normal(size=(300, 6))
    y = x[:, :2] + 0.1 * rng.normal(size=(300, 2))
    latent = x[:, :2]
    data = x if metric == "euclidean" else squareform(pdist(x))
    side = prepare_data(data, metric=metric, latent=latent, **case)
    for emb in (y, rng.normal(size=(300, 2))):
        plain = score(data, emb, ks=[5, 10], metric=metric, latent=latent, **case)
        shared = score(data, emb, ks=[5, 10], metric=metric, latent=latent, prepared=side, **case)
        assert shared.values == plain.values
        assert shared.intervals == plain.intervals
    assert (side.area_ranks is not None) == ("estimate_above" not in case)
    assert side.pairs.exact == ("pair_sample_above" not in case)


def test_a_data_side_for_other_settings_or_sizes_is_refused():
    x = np.random.default_rng(0).normal(size=(80, 4))
    with pytest.raises(ValueError, match="other scoring settings"):
        score(x, x[:, :2], ks=[5], prepared=prepare_data(x, seed=3))
    with pytest.raises(ValueError, match="made for 60 points"):
        score(x, x[:, :2], ks=[5], prepared=prepare_data(x[:60]))


def test_staged_side_reads_back_and_a_changed_file_is_not_used(tmp_path, caplog):
    ds = load_dataset("rolled_sheet", {"n": 200})
    scoring = Scoring(ks=(5,), pair_sample_above=100, pairs=3000)
    side = dataside.make(ds, scoring)
    assert side is not None
    dataside.stage(side, tmp_path)
    back = dataside.load(tmp_path)
    assert back is not None and back.n == side.n and back.pairs.exact is False
    np.testing.assert_array_equal(back.pairs.d_ranks, side.pairs.d_ranks)
    assert back.pairs.lat_sorted is not None  # the rolled sheet has latent coordinates
    y = ds.X[:, :2]
    opts = scoring.engine_options()
    assert score(ds.X, y, ks=[5], latent=ds.latent, prepared=back, **opts).values == (
        score(ds.X, y, ks=[5], latent=ds.latent, **opts).values
    )
    # Fail closed: one flipped byte in a staged array and the side is not trusted.
    target = tmp_path / dataside.FOLDER / "d_ranks.npy"
    raw = bytearray(target.read_bytes())
    raw[-3] ^= 0xFF
    target.write_bytes(bytes(raw))
    with caplog.at_level(logging.WARNING):
        assert dataside.load(tmp_path) is None
    assert "checksum differs" in caplog.text
    assert dataside.load(tmp_path / "nothing-staged") is None


def test_a_run_makes_one_data_side_per_dataset_scored_in_full(tmp_path, monkeypatch):
    made = []
    real = dataside.make

    def counted(dataset, scoring):
        made.append(dataset.name)
        return real(dataset, scoring)

    monkeypatch.setattr(dataside, "make", counted)
    suite = tmp_path / "s.yaml"
    suite.write_text(
        "name: s\nseeds: 2\ndatasets:\n  - use: iris\n  - use: wine\n    holdout: 0.2\n"
        "methods:\n  - use: pca\n  - use: random_projection\nmeasures:\n  k: [5]\n"
    )
    shared = run_suite(suite, tmp_path / "out", isolate=False)
    assert made == ["iris"]  # wine's cells each score their own training split
    assert shared.counts.get("ok") == 8
    monkeypatch.setattr(dataside, "wanted", lambda cells: set())
    alone = run_suite(suite, tmp_path / "out2", isolate=False)
    a = shared.scores.set_index("key").sort_index()
    b = alone.scores.set_index("key").sort_index()
    cols = [c for c in a.columns if "@" in c or c in ("stress", "shepard_spearman", "rnx_auc")]
    assert a[cols].equals(b[cols])
