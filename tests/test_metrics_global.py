"""Distance-preservation and label measures, exact and from sampled pairs."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.distance import pdist
from sklearn.datasets import make_blobs
from sklearn.metrics import silhouette_score

from harness.metrics import score
from harness.metrics._global import sammon_stress, stress


def test_stress_hand_worked_example():
    # Three points, data x = 0, 1, 3 and embedding y = 0, 2, 2 (1-D).
    # Pairs (01, 02, 12): d = (1, 3, 2), e = (2, 2, 0).
    # Kruskal 1964 stress-1 with best scale: s = sum(de)/sum(e^2) = (2+6+0)/(4+4+0) = 1;
    # residuals d - s e = (-1, 1, 2), sum of squares 6; sum d^2 = 14;
    # stress = sqrt(6/14) = sqrt(3/7).
    d, e = np.array([1.0, 3.0, 2.0]), np.array([2.0, 2.0, 0.0])
    assert stress(d, e) == pytest.approx(np.sqrt(3 / 7), abs=1e-15)


def test_sammon_hand_worked_example():
    # Same pairs.  Sammon 1969 with best scale: s = sum(e)/sum(e^2/d) = 4/(4 + 4/3 + 0) = 3/4;
    # residuals (1-1.5, 3-1.5, 2-0) = (-0.5, 1.5, 2);
    # sum res^2/d = 0.25/1 + 2.25/3 + 4/2 = 3; sum d = 6; Sammon stress = 3/6 = 0.5.
    d, e = np.array([1.0, 3.0, 2.0]), np.array([2.0, 2.0, 0.0])
    assert sammon_stress(d, e) == pytest.approx(0.5, abs=1e-15)


def test_sammon_leaves_out_zero_data_distances():
    # A duplicate pair (d = 0) is left out of both sums (documented rule):
    # the value equals the example above.
    d, e = np.array([1.0, 3.0, 2.0, 0.0]), np.array([2.0, 2.0, 0.0, 5.0])
    assert sammon_stress(d, e) == pytest.approx(0.5, abs=1e-15)


def test_uniformly_scaled_copy_has_zero_stress():
    # e = d / 3 exactly proportional: the optimal scale is 3 and both stresses are 0
    # (Kruskal 1964; Sammon 1969).
    rng = np.random.default_rng(0)
    x = rng.standard_normal((150, 3))
    res = score(x, x / 4.0 + 1.0, ks=[5])
    assert res.values["stress"] == pytest.approx(0.0, abs=1e-12)
    assert res.values["sammon_stress"] == pytest.approx(0.0, abs=1e-12)
    assert res.values["shepard_spearman"] == pytest.approx(1.0, abs=1e-12)


def test_exact_global_measures_match_formulas_and_scipy():
    rng = np.random.default_rng(1)
    x, y, lat = rng.standard_normal((90, 5)), rng.standard_normal((90, 2)), rng.standard_normal((90, 2))
    res = score(x, y, ks=[5], latent=lat)
    d, e = pdist(x), pdist(y)
    s = (d @ e) / (e @ e)
    # Kruskal 1964 with the closed-form scale written out here.
    assert res.values["stress"] == pytest.approx(np.sqrt(np.sum((d - s * e) ** 2) / np.sum(d**2)), rel=1e-12)
    s2 = e.sum() / np.sum(e**2 / d)
    # Sammon 1969 with the closed-form scale.
    assert res.values["sammon_stress"] == pytest.approx(np.sum((d - s2 * e) ** 2 / d) / d.sum(), rel=1e-12)
    # Spearman correlation of pairwise distances: scipy.stats.spearmanr.
    assert res.values["shepard_spearman"] == pytest.approx(stats.spearmanr(d, e).statistic, abs=1e-12)
    assert res.values["latent_spearman"] == pytest.approx(stats.spearmanr(pdist(lat), e).statistic, abs=1e-12)
    assert res.estimated == frozenset() and res.intervals == {}


def test_optimal_scale_is_a_minimum():
    # The closed-form scales minimise the stresses: nearby scales do worse.
    rng = np.random.default_rng(2)
    d, e = rng.uniform(0.5, 2, 200), rng.uniform(0.5, 2, 200)
    s = (d @ e) / (e @ e)
    s2 = e.sum() / np.sum(e**2 / d)
    for f in (0.99, 1.01):
        assert stress(d, e) < np.sqrt(np.sum((d - f * s * e) ** 2) / np.sum(d**2))
        assert sammon_stress(d, e) < np.sum((d - f * s2 * e) ** 2 / d) / d.sum()


def test_constant_embedding_raises():
    rng = np.random.default_rng(3)
    x = rng.standard_normal((40, 3))
    with pytest.raises(ValueError, match="embedding"):
        score(x, np.zeros((40, 2)), ks=[3])


@pytest.mark.slow
def test_sampled_pair_intervals_cover_exact_value():
    # 95% jackknife intervals (Efron 1982) should cover the all-pairs value in
    # about 95 of 100 seeded samples; require at least 85 for each measure.
    rng = np.random.default_rng(4)
    n = 400
    x = rng.standard_normal((n, 6))
    y = x[:, :2] + 0.5 * rng.standard_normal((n, 2))
    lat = x[:, :3]
    exact = score(x, y, ks=[5], latent=lat).values
    names = ("stress", "sammon_stress", "shepard_spearman", "latent_spearman")
    covered = dict.fromkeys(names, 0)
    for seed in range(100):
        res = score(x, y, ks=[5], latent=lat, seed=seed, pair_sample_above=10, n_pairs=2000)
        assert res.estimated >= set(names)
        for name in names:
            low, high = res.intervals[name]
            covered[name] += low <= exact[name] <= high
    assert all(c >= 85 for c in covered.values()), covered


def test_knn_accuracy_on_separated_blobs():
    # Far-apart blobs: every k-NN vote is right, accuracy 1 (common practice, no source).
    x, labels = make_blobs(
        n_samples=150, centers=3, n_features=5, cluster_std=0.3, center_box=(-50, 50), random_state=0
    )
    res = score(x, x[:, :2], ks=[5], labels=labels)
    assert res.values["knn_accuracy@5"] == pytest.approx(1.0)


def test_silhouette_matches_scikit_learn():
    # Source: sklearn.metrics.silhouette_score (all points below 5000).
    x, labels = make_blobs(n_samples=200, centers=3, n_features=4, random_state=1)
    y = x[:, :2]
    res = score(x, y, ks=[5], labels=labels)
    assert res.values["silhouette"] == pytest.approx(silhouette_score(y, labels), abs=1e-12)


def test_single_class_has_no_silhouette():
    rng = np.random.default_rng(5)
    x = rng.standard_normal((60, 3))
    res = score(x, x[:, :2], ks=[3], labels=np.zeros(60, dtype=int))
    assert "silhouette" not in res.values
    assert res.values["knn_accuracy@3"] == pytest.approx(1.0)
