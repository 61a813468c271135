"""Measures at large offsets and extreme magnitudes, the full-range R_NX area and the tie rule."""

from __future__ import annotations

import numpy as np
import pytest
from naive_ranks import full_sort_ranks, squared_distances
from scipy.spatial import cKDTree
from scipy.spatial.distance import cdist
from sklearn.datasets import make_s_curve
from sklearn.manifold import trustworthiness as sk_trustworthiness
from sklearn.model_selection import StratifiedKFold, cross_val_score
from sklearn.neighbors import KNeighborsClassifier

from harness.compare.stats import knn_overlap
from harness.methods._fit import DegenerateEmbedding, check_embedding
from harness.metrics import _rnx_area as rnx_area_module
from harness.metrics import coranking_curve, evaluate, score
from harness.metrics._labels import knn_accuracy
from harness.suite._read import measure_key


@pytest.fixture(scope="module")
def noisy_plane() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(0)
    x = rng.normal(size=(1000, 3))
    return x, x[:, :2] + 0.1 * rng.normal(size=(1000, 2))


def _knn_recall(x: np.ndarray, y: np.ndarray, k: int) -> float:
    # Neighbourhood preservation by its definition, neighbours from SciPy's k-d tree
    # (continuous data: no ties); the first neighbour returned is the point itself.
    nx = cKDTree(x).query(x, k + 1)[1][:, 1:]
    ny = cKDTree(y).query(y, k + 1)[1][:, 1:]
    return float(np.mean([len(set(a) & set(b)) for a, b in zip(nx, ny)]) / k)


# ---------------------------------------------------------------- offsets
@pytest.mark.parametrize("offset", [1e3, 1e7, 1e12])
def test_data_offset_does_not_change_neighbourhood_measures(noisy_plane, offset):
    x, y = noisy_plane
    moved = x + offset
    # X + offset rounds X to a multiple of ulp(offset) (1.2e-4 at 1e12); those
    # rounded points are exactly (X + offset) - offset.  The value must be that
    # of the points, whatever their offset.
    points = moved - offset
    value = evaluate(moved, y, k=5)["knn_recall"]
    assert value == evaluate(points, y, k=5)["knn_recall"]
    assert value == pytest.approx(_knn_recall(points, y, 5), abs=1e-12)  # definition, full sort
    if offset < 1e12:  # below 1e12 the rounding moves no neighbour: the unshifted value 0.1750
        assert value == pytest.approx(_knn_recall(x, y, 5), abs=1e-12)
        assert round(value, 4) == 0.175


@pytest.mark.parametrize("offset", [1e3, 1e7, 1e12])
def test_embedding_offset_does_not_change_trustworthiness(noisy_plane, offset):
    x, y = noisy_plane
    points = (y + offset) - offset
    value = evaluate(x, y + offset, k=5)["trustworthiness"]
    # Reference: scikit-learn's trustworthiness of the same points at the origin.
    assert value == pytest.approx(sk_trustworthiness(x, points, n_neighbors=5), abs=1e-12)
    if offset < 1e12:
        assert round(value, 4) == 0.8214


def test_s_curve_shifted_far_from_the_origin():
    s, _ = make_s_curve(800, random_state=0)
    e = s[:, [0, 2]]
    value = score(s + 1e8, e + 1e8, ks=[10]).values["trustworthiness@10"]
    # scikit-learn's trustworthiness at the origin (Venna & Kaski 2001 definition).
    assert value == pytest.approx(sk_trustworthiness(s, e, n_neighbors=10), abs=1e-12)


# ---------------------------------------------------------------- magnitudes
@pytest.fixture(scope="module")
def plain() -> tuple[np.ndarray, np.ndarray, dict]:
    rng = np.random.default_rng(1)
    a = rng.normal(size=(300, 5))
    b = a[:, :2] + 0.1 * rng.normal(size=(300, 2))
    return a, b, score(a, b, ks=[10]).values


@pytest.mark.parametrize(
    "make",
    [
        pytest.param(lambda a, b: (a * 1e160, b, "euclidean"), id="table-1e160"),
        pytest.param(lambda a, b: (a * 1e-160, b * 1e-160, "euclidean"), id="both-1e-160"),
        pytest.param(lambda a, b: (a, b * 1e300, "euclidean"), id="embedding-1e300"),
        pytest.param(lambda a, b: (cdist(a, a) * 1e200, b, "precomputed"), id="distances-1e200"),
    ],
)
def test_extreme_magnitudes_give_the_plain_values(plain, make):
    # Stress-1 with the best scaling (Kruskal 1964), Sammon stress with the best
    # scaling (Sammon 1969), Spearman correlations and all rank measures are
    # scale-free by definition; only rounding of the scaled input may differ.
    a, b, expected = plain
    x, y, metric = make(a, b)
    values = score(x, y, ks=[10], metric=metric).values
    assert values.keys() == expected.keys()
    for key, value in values.items():
        assert np.isfinite(value), key
        assert value == pytest.approx(expected[key], abs=1e-10), key


def test_tiny_embedding_is_not_called_coincident():
    b = np.random.default_rng(2).normal(size=(50, 2))
    np.testing.assert_array_equal(check_embedding(b * 1e-160, 50, 2), b * 1e-160)
    # Points that differ only by rounding noise of their magnitude still coincide.
    with pytest.raises(DegenerateEmbedding, match="coincide"):
        check_embedding(1e5 + 1e-9 * b, 50, 2)


def test_a_non_finite_measure_fails_with_its_name(monkeypatch, plain):
    a, b, _ = plain
    from harness import metrics

    def broken(*args, **kwargs):
        return {"stress": float("nan")}, {}

    monkeypatch.setattr(metrics, "global_measures", broken)
    with pytest.raises(ValueError, match="stress is not a finite number"):
        score(a, b, ks=[10])


# ---------------------------------------------------------------- R_NX area
def _area(rnx: np.ndarray) -> float:
    # Lee, Peluffo-Ordonez & Verleysen 2015: AUC = sum_K R_NX(K)/K / sum_K 1/K.
    big_k = np.arange(1, len(rnx) + 1)
    return float(np.sum(rnx / big_k) / np.sum(1.0 / big_k))


def test_rnx_auc_covers_the_whole_curve_and_rnx_auc_at_k_its_head():
    rng = np.random.default_rng(3)
    n = 120
    x, y = rng.normal(size=(n, 6)), rng.normal(size=(n, 2))
    x[:, :2] += 2 * y  # partly kept neighbourhoods
    res = score(x, y, ks=[5, 20])
    curve = coranking_curve(x, y, k_max=n - 2)["R_NX"].to_numpy()  # K = 1..n-2 (Lee & Verleysen 2009)
    assert res.values["rnx_auc"] == pytest.approx(_area(curve), abs=1e-12)
    for k in (5, 20):
        assert res.values[f"rnx_auc@{k}"] == pytest.approx(_area(curve[:k]), abs=1e-12)
    assert "rnx_auc" not in res.estimated


def test_rnx_auc_of_an_isometry_is_one_and_of_unrelated_points_near_zero():
    # R_NX(K) = 1 for a perfect embedding and has expectation 0 for a random one
    # (Lee, Peluffo-Ordonez & Verleysen 2015).
    rng = np.random.default_rng(4)
    x = rng.normal(size=(400, 3))
    assert score(x, x[:, ::-1] + 7.0, ks=[10]).values["rnx_auc"] == pytest.approx(1.0, abs=1e-12)
    unrelated = score(x, rng.normal(size=(400, 2)), ks=[10]).values["rnx_auc"]
    assert abs(unrelated) < 0.02


def test_rnx_auc_is_estimated_from_query_points_above_the_full_rank_budget(monkeypatch):
    rng = np.random.default_rng(5)
    n = 600
    y = rng.normal(size=(n, 2))
    x = np.hstack([y, 0.5 * rng.normal(size=(n, 3))])
    exact = score(x, y, ks=[10]).values["rnx_auc"]
    monkeypatch.setattr(rnx_area_module, "FULL_RANK_ELEMENTS", n * n - 1)
    est = score(x, y, ks=[10], n_queries=300)
    low, high = est.intervals["rnx_auc"]
    assert "rnx_auc" in est.estimated and low < est.values["rnx_auc"] < high
    # well inside three times the 95% interval's reach (a seeded draw, not a coverage claim)
    assert low - 2 * (high - low) < exact < high + 2 * (high - low)


def test_suites_may_name_both_areas():
    assert measure_key("rnx_auc", "rank_by", (10,)) == "rnx_auc"
    assert measure_key("rnx_auc@10", "rank_by", (10,)) == "rnx_auc@10"


# ---------------------------------------------------------------- tie rule
def _integer_plane(seed: int = 2) -> np.ndarray:
    return np.random.default_rng(seed).integers(0, 6, size=(400, 2)).astype(float)


def test_knn_overlap_of_an_isometric_copy_is_one():
    # Swapping the axes keeps every distance (an isometry), so every
    # neighbourhood must be the same under one tie rule.
    g = _integer_plane()
    assert knn_overlap(g, g[:, ::-1], 10) == 1.0
    assert knn_overlap(g, -g + 3.0, 10) == 1.0


def test_knn_overlap_uses_the_distance_then_index_order():
    g = _integer_plane()
    h = np.random.default_rng(6).integers(0, 4, size=(400, 2)).astype(float)
    _, og = full_sort_ranks(squared_distances(g))  # (distance, index) order, naive full sort
    _, oh = full_sort_ranks(squared_distances(h))
    expected = np.mean([len(set(og[i, :10]) & set(oh[i, :10])) for i in range(400)]) / 10
    assert knn_overlap(g, h, 10) == pytest.approx(expected, abs=1e-15)


@pytest.mark.parametrize("k", [1, 4, 5, 10])
def test_knn_accuracy_matches_scikit_learn_without_ties(k):
    # Reference: scikit-learn's KNeighborsClassifier under the same stratified folds.
    rng = np.random.default_rng(k)
    y, labels = rng.normal(size=(150, 2)), rng.integers(0, 3, 150)
    cv = StratifiedKFold(5, shuffle=True, random_state=0)
    expected = cross_val_score(KNeighborsClassifier(n_neighbors=k), y, labels, cv=cv).mean()
    assert knn_accuracy(y, labels, k, 0) == pytest.approx(expected, abs=1e-12)


def test_knn_accuracy_on_ties_follows_the_index_rule():
    g = _integer_plane()
    labels = np.random.default_rng(7).integers(0, 2, 400)
    value = knn_accuracy(g, labels, 10, 0)
    assert value == knn_accuracy(g[:, ::-1], labels, 10, 0) == knn_accuracy(1e9 - g, labels, 10, 0)
    # Reference written from the rule: neighbours among the training fold by
    # (distance, index), majority vote, a tie in votes to the smaller class.
    d = squared_distances(g)
    correct = []
    for train, test in StratifiedKFold(5, shuffle=True, random_state=0).split(g, labels):
        fold = []
        for i in test:
            near = train[np.lexsort((train, d[i, train]))[:10]]
            fold.append(np.argmax(np.bincount(labels[near], minlength=2)) == labels[i])
        correct.append(np.mean(fold))
    assert value == pytest.approx(np.mean(correct), abs=1e-15)
