"""Neighbourhood measures against plain full-sort references and scikit-learn."""

from __future__ import annotations

import numpy as np
import pytest
from naive_ranks import full_sort_ranks, squared_distances
from scipy.spatial.distance import cdist
from sklearn.decomposition import PCA
from sklearn.manifold import trustworthiness as sk_trustworthiness

from harness.errors import InputError
from harness.metrics import coranking_curve, evaluate, score
from harness.metrics._distances import DistanceRows
from harness.metrics._ranks import rank_blocks

# ---------------------------------------------------------------- reference


def reference(x: np.ndarray, y: np.ndarray, k: int, dist_x: np.ndarray | None = None) -> dict:
    """Every local measure written straight from its formula, O(n^2 log n)."""
    n = len(y)
    rx, ox = full_sort_ranks(squared_distances(x) if dist_x is None else dist_x)
    ry, oy = full_sort_ranks(squared_distances(y))
    out = {}
    # Venna & Kaski 2001, normalisation as in scikit-learn's trustworthiness.
    norm = 2.0 / (n * k * (2 * n - 3 * k - 1))
    out["trustworthiness"] = 1 - norm * sum(max(0, rx[i, j] - k) for i in range(n) for j in oy[i, :k])
    out["continuity"] = 1 - norm * sum(max(0, ry[i, j] - k) for i in range(n) for j in ox[i, :k])

    def overlap(kk: int) -> float:
        return np.mean([len(set(ox[i, :kk]) & set(oy[i, :kk])) for i in range(n)])

    out["knn_recall"] = overlap(k) / k
    # Lee & Verleysen 2009: H_K = n * sum_{l=1..K} |n - 2l| / l.
    h = n * sum(abs(n - 2 * ell) / ell for ell in range(1, k + 1))
    out["mrre_data"] = sum(abs(rx[i, j] - ry[i, j]) / rx[i, j] for i in range(n) for j in ox[i, :k]) / h
    out["mrre_embedding"] = sum(abs(rx[i, j] - ry[i, j]) / ry[i, j] for i in range(n) for j in oy[i, :k]) / h
    q = np.array([overlap(kk) / kk for kk in range(1, k + 1)])
    big_k = np.arange(1, k + 1)
    rnx = ((n - 1) * q - big_k) / (n - 1 - big_k)
    # Chen & Buja 2009: LCMC(K) = Q_NX(K) - K / (n - 1).
    out["lcmc"] = q[-1] - k / (n - 1)
    # Lee, Peluffo-Ordonez & Verleysen 2015: area with weights 1/K, here truncated at K = k.
    out["rnx_auc"] = np.sum(rnx / big_k) / np.sum(1 / big_k)
    out["Q_NX"], out["R_NX"] = q, rnx
    # The same paper's area over the whole range K = 1..n-2.
    q_all = np.array([overlap(kk) / kk for kk in range(1, n - 1)])
    k_all = np.arange(1, n - 1)
    rnx_all = ((n - 1) * q_all - k_all) / (n - 1 - k_all)
    out["rnx_auc_full"] = np.sum(rnx_all / k_all) / np.sum(1 / k_all)
    return out


LOCAL = ("trustworthiness", "continuity", "knn_recall", "mrre_data", "mrre_embedding", "lcmc", "rnx_auc")


def _local_values(result, k: int) -> dict:
    return {name: result.values[f"{name}@{k}"] for name in LOCAL} | {"rnx_auc_full": result.values["rnx_auc"]}


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(20240611)


# ---------------------------------------------------------------- scikit-learn
@pytest.mark.parametrize(
    "seed,n,d,k", [(0, 60, 5, 1), (1, 120, 8, 5), (2, 200, 3, 17), (3, 301, 20, 99), (4, 90, 2, 44)]
)
def test_trustworthiness_matches_scikit_learn(seed, n, d, k):
    # Source: sklearn.manifold.trustworthiness (scikit-learn), random data without ties.
    r = np.random.default_rng(seed)
    x, y = r.standard_normal((n, d)), r.standard_normal((n, 2))
    res = score(x, y, ks=[k], pair_sample_above=0, n_pairs=100)
    assert res.values[f"trustworthiness@{k}"] == pytest.approx(
        sk_trustworthiness(x, y, n_neighbors=k), abs=1e-10
    )
    # Continuity is trustworthiness with the spaces swapped (Venna & Kaski 2001).
    assert res.values[f"continuity@{k}"] == pytest.approx(sk_trustworthiness(y, x, n_neighbors=k), abs=1e-10)


def test_continuity_is_swapped_trustworthiness(rng):
    # Venna & Kaski 2001: continuity = trustworthiness with data and embedding exchanged.
    x, y = rng.standard_normal((150, 6)), rng.standard_normal((150, 3))
    a = score(x, y, ks=[7, 20], pair_sample_above=0, n_pairs=100)
    b = score(y, x, ks=[7, 20], pair_sample_above=0, n_pairs=100)
    for k in (7, 20):
        assert a.values[f"continuity@{k}"] == pytest.approx(b.values[f"trustworthiness@{k}"], abs=1e-12)
        assert a.values[f"mrre_data@{k}"] == pytest.approx(b.values[f"mrre_embedding@{k}"], abs=1e-12)


# ---------------------------------------------------------------- full-sort reference
@pytest.mark.parametrize("k", [1, 2, 5, 13, 29])
def test_all_local_measures_match_reference(rng, k):
    x, y = rng.standard_normal((60, 7)), rng.standard_normal((60, 2))
    res = score(x, y, ks=[k], pair_sample_above=0, n_pairs=100)
    ref = reference(x, y, k)
    for name, value in _local_values(res, k).items():
        assert value == pytest.approx(ref[name], abs=1e-12), name
    np.testing.assert_allclose(res.curve["Q_NX"], ref["Q_NX"], atol=1e-12)
    np.testing.assert_allclose(res.curve["R_NX"], ref["R_NX"], atol=1e-12)


@pytest.mark.parametrize("seed", range(4))
def test_ties_and_duplicates_match_reference(seed):
    # Integer coordinates make every computed distance exact, so equal distances
    # are real ties, broken by point index as documented; duplicates included.
    r = np.random.default_rng(seed)
    x = r.integers(0, 3, size=(50, 3)).astype(float)
    y = r.integers(0, 2, size=(50, 2)).astype(float)
    x[10] = x[11] = x[12]
    k = int(r.integers(1, 25))
    res = score(x, y, ks=[k], pair_sample_above=0, n_pairs=100)
    ref = reference(x, y, k)
    for name, value in _local_values(res, k).items():
        assert value == pytest.approx(ref[name], abs=1e-12), name


@pytest.mark.parametrize("block_rows", [1, 5, 31, 32, 33, 40])
@pytest.mark.parametrize("integer", [False, True])
def test_rank_tables_independent_of_block_size(block_rows, integer):
    # n = 33 is one more than a sub-block (32 rows); block sizes below, at and above n.
    r = np.random.default_rng(block_rows)
    n, k = 33, 31  # k = n - 2, the largest the co-ranking curve allows
    if integer:
        x, y = r.integers(0, 3, (n, 4)).astype(float), r.integers(0, 3, (n, 2)).astype(float)
    else:
        x, y = r.standard_normal((n, 4)), r.standard_normal((n, 2))
    rx, ox = full_sort_ranks(squared_distances(x))
    ry, oy = full_sort_ranks(squared_distances(y))
    blocks = list(rank_blocks(DistanceRows(points=x), DistanceRows(points=y), np.arange(n), k, block_rows))
    rho = np.vstack([b.data_rank_of_embedding_nn for b in blocks])
    rr = np.vstack([b.embedding_rank_of_data_nn for b in blocks])
    np.testing.assert_array_equal(rho, np.take_along_axis(rx, oy[:, :k], 1))
    np.testing.assert_array_equal(rr, np.take_along_axis(ry, ox[:, :k], 1))


def test_small_memory_budget_gives_same_values(rng):
    x, y = rng.standard_normal((70, 5)), rng.standard_normal((70, 2))
    big = score(x, y, ks=[3, 10], pair_sample_above=0, n_pairs=100)
    small = score(x, y, ks=[3, 10], pair_sample_above=0, n_pairs=100, memory_bytes=1)
    assert big.values == small.values


def test_curve_up_to_n_minus_2_matches_reference(rng):
    # R_NX(K) = ((n-1) Q_NX(K) - K) / (n-1-K) is defined up to K = n - 2 (Lee & Verleysen 2009).
    n = 40
    x, y = rng.standard_normal((n, 4)), rng.standard_normal((n, 2))
    curve = coranking_curve(x, y, k_max=n - 2)
    ref = reference(x, y, n - 2)
    np.testing.assert_allclose(curve["Q_NX"], ref["Q_NX"], atol=1e-12)
    np.testing.assert_allclose(curve["R_NX"], ref["R_NX"], atol=1e-12)


def test_q_nx_is_mean_overlap_over_k(rng):
    # Lee & Verleysen 2009: Q_NX(K) = mean_i |N_X^K(i) ∩ N_Y^K(i)| / K, and
    # R_NX(K) = ((n-1) Q_NX(K) - K) / (n-1-K).
    n = 80
    x, y = rng.standard_normal((n, 5)), rng.standard_normal((n, 2))
    _, ox = full_sort_ranks(squared_distances(x))
    _, oy = full_sort_ranks(squared_distances(y))
    res = score(x, y, ks=[5], curve_k_max=30, pair_sample_above=0, n_pairs=100)
    for kk in (1, 5, 12, 30):
        mean_overlap = np.mean([len(set(ox[i, :kk]) & set(oy[i, :kk])) for i in range(n)])
        q = res.curve["Q_NX"].iloc[kk - 1]
        assert q == pytest.approx(mean_overlap / kk, abs=1e-12)
        assert res.curve["R_NX"].iloc[kk - 1] == pytest.approx(((n - 1) * q - kk) / (n - 1 - kk), abs=1e-12)


# ---------------------------------------------------------------- known answers
def test_isometry_is_perfect(rng):
    # A rotation plus translation keeps every distance, so every neighbourhood:
    # T = C = recall = 1 and R_NX = 1 (Venna & Kaski 2001; Lee & Verleysen 2009).
    x = rng.standard_normal((200, 2))
    angle = 0.7
    rot = np.array([[np.cos(angle), -np.sin(angle)], [np.sin(angle), np.cos(angle)]])
    y = x @ rot.T + np.array([5.0, -3.0])
    res = score(x, y, ks=[5, 20], curve_k_max=60)
    for k in (5, 20):
        assert res.values[f"trustworthiness@{k}"] == pytest.approx(1.0, abs=1e-12)
        assert res.values[f"continuity@{k}"] == pytest.approx(1.0, abs=1e-12)
        assert res.values[f"knn_recall@{k}"] == pytest.approx(1.0, abs=1e-12)
        assert res.values[f"mrre_data@{k}"] == pytest.approx(0.0, abs=1e-12)
    np.testing.assert_allclose(res.curve["R_NX"], 1.0, atol=1e-12)
    assert res.values["stress"] == pytest.approx(0.0, abs=1e-7)
    assert res.values["sammon_stress"] == pytest.approx(0.0, abs=1e-12)


def test_plane_in_ten_dimensions_recovered_by_pca(rng):
    # Points on a 2-D plane inside 10-D: PCA to 2-D is an isometry of the plane
    # (up to rounding), so T = C = 1 (Venna & Kaski 2001).
    basis = np.linalg.qr(rng.standard_normal((10, 2)))[0]
    x = rng.uniform(-1, 1, (300, 2)) @ basis.T + rng.standard_normal(10)
    y = PCA(n_components=2).fit_transform(x)
    res = score(x, y, ks=[10])
    assert res.values["trustworthiness@10"] == pytest.approx(1.0, abs=1e-12)
    assert res.values["continuity@10"] == pytest.approx(1.0, abs=1e-12)


def test_precomputed_matches_coordinates(rng):
    x, y = rng.standard_normal((120, 6)), rng.standard_normal((120, 2))
    a = score(x, y, ks=[4, 15], pair_sample_above=10_000)
    b = score(cdist(x, x), y, ks=[4, 15], metric="precomputed", pair_sample_above=10_000)
    assert a.values.keys() == b.values.keys()
    for key in a.values:
        assert a.values[key] == pytest.approx(b.values[key], abs=1e-10), key


def test_evaluate_keys_are_plain(rng):
    x, y = rng.standard_normal((100, 4)), rng.standard_normal((100, 2))
    labels = np.repeat([0, 1], 50)
    out = evaluate(x, y, k=10, labels=labels)
    assert set(out) == {
        "trustworthiness",
        "continuity",
        "knn_recall",
        "stress",
        "sammon_stress",
        "shepard_spearman",
        "mrre_data",
        "mrre_embedding",
        "lcmc",
        "rnx_auc",
        "rnx_auc@10",
        "knn_accuracy",
        "silhouette",
    }
    assert all(type(v) is float for v in out.values())
    assert out["trustworthiness"] == pytest.approx(sk_trustworthiness(x, y, n_neighbors=10), abs=1e-10)


# ---------------------------------------------------------------- validation
@pytest.mark.parametrize(
    "kwargs,where",
    [
        ({"ks": [0]}, "ks"),
        ({"ks": [25]}, "ks"),
        ({"ks": []}, "ks"),
        ({"ks": [2.5]}, "ks"),
        ({"ks": [3], "metric": "cosine"}, "metric"),
        ({"ks": [3], "curve_k_max": 49}, "curve_k_max"),
    ],
)
def test_bad_parameters_raise_input_error(rng, kwargs, where):
    x, y = rng.standard_normal((50, 3)), rng.standard_normal((50, 2))
    with pytest.raises(InputError, match=where):
        score(x, y, **kwargs)


def test_bad_arrays_raise_input_error(rng):
    x, y = rng.standard_normal((50, 3)), rng.standard_normal((50, 2))
    with pytest.raises(InputError, match="Y"):
        score(x, y[:40], ks=[3])
    bad = x.copy()
    bad[3, 1] = np.nan
    with pytest.raises(InputError, match="X"):
        score(bad, y, ks=[3])
    with pytest.raises(InputError, match="square"):
        score(x, y, ks=[3], metric="precomputed")
    with pytest.raises(InputError, match="labels"):
        score(x, y, ks=[3], labels=np.zeros(49))
