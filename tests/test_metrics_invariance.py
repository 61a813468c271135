"""Every measure is unchanged by translation, uniform scaling and orthogonal maps of either space.

Trustworthiness, continuity (Venna & Kaski 2001, 2006), the rank errors and the
co-ranking curve (Lee & Verleysen 2009; Lee, Peluffo-Ordonez & Verleysen 2015)
depend on ranks of distances only; stress after the best scaling (Kruskal
1964), Sammon stress after the best scaling (Sammon 1969) and Spearman
correlations are unchanged by a uniform scaling of either space; all of them
depend on distances only, so isometries leave them alone.  The tests hold the
harness to those definitions on random data.

Exactness: data on a grid of 2^-10 with |x| <= 1 plus an integer offset below
2^40 (> 1e12) are floats exactly, as are their images under a power-of-two
scaling and a signed permutation of the axes; the measured points are then the
same points and every value must be bit-identical.  A general rotation rounds
every coordinate, so there the values must agree to 1e-12 and the ranks (no
near-ties in continuous random data) exactly.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial.distance import cdist
from scipy.stats import ortho_group

from harness.compare.stats import knn_overlap
from harness.metrics import score
from harness.metrics._distances import DistanceRows
from harness.metrics._ranks import rank_blocks
from harness.metrics._standard import standard_distances, standard_points

OFFSET = 10**12


def _grid(rng: np.random.Generator, n: int, d: int) -> np.ndarray:
    return rng.integers(-1024, 1025, size=(n, d)) / 1024.0


def _labels(rng: np.random.Generator, n: int) -> np.ndarray:
    return rng.permutation(np.arange(n) % 2)


def _score(x, y, k, labels, latent, metric="euclidean"):
    return score(x, y, ks=[k], labels=labels, latent=latent, metric=metric).values


def _rank_tables(x, y, metric="euclidean"):
    n = len(y)
    data = (
        DistanceRows(matrix=standard_distances(x))
        if metric == "precomputed"
        else DistanceRows(points=standard_points(x))
    )
    blocks = list(rank_blocks(data, DistanceRows(points=standard_points(y)), np.arange(n), n - 2, n))
    return np.vstack([b.data_rank_of_embedding_nn for b in blocks]), np.vstack(
        [b.embedding_rank_of_data_nn for b in blocks]
    )


def _exact_map(rng: np.random.Generator, z: np.ndarray, scale_exp: int) -> np.ndarray:
    """Signed axis permutation, power-of-two scaling and integer translation: exact for grid data."""
    d = z.shape[1]
    mapped = z[:, rng.permutation(d)] * rng.choice([-1.0, 1.0], size=d)
    shift = rng.integers(-OFFSET, OFFSET + 1, size=d).astype(np.float64)
    return np.ldexp(mapped, scale_exp) + np.ldexp(shift, scale_exp)


cases = st.fixed_dictionaries(
    {
        "seed": st.integers(0, 2**32 - 1),
        "n": st.integers(12, 20),
        "d": st.integers(2, 4),
        "q": st.integers(1, 3),
        "which": st.sampled_from(["X", "Y", "both"]),
        "scale_x": st.integers(-500, 500),
        "scale_y": st.integers(-500, 500),
    }
)


@settings(max_examples=200, deadline=None)
@given(case=cases)
def test_exact_maps_leave_every_measure_and_rank_unchanged(case):
    rng = np.random.default_rng(case["seed"])
    n = case["n"]
    x, y, latent = _grid(rng, n, case["d"]), _grid(rng, n, case["q"]), _grid(rng, n, 2)
    labels, k = _labels(rng, n), int(rng.integers(2, (n - 1) // 2))
    mx = _exact_map(rng, x, case["scale_x"]) if case["which"] != "Y" else x
    my = _exact_map(rng, y, case["scale_y"]) if case["which"] != "X" else y
    # Same points (only their coordinates moved): identical values, bit for bit.
    assert _score(mx, my, k, labels, latent) == _score(x, y, k, labels, latent)
    for before, after in zip(_rank_tables(x, y), _rank_tables(mx, my)):
        np.testing.assert_array_equal(before, after)
    assert knn_overlap(x, mx, k) == 1.0 and knn_overlap(y, my, k) == 1.0


@settings(max_examples=200, deadline=None)
@given(case=cases)
def test_power_of_two_scaling_of_a_distance_matrix_changes_nothing(case):
    rng = np.random.default_rng(case["seed"])
    n = case["n"]
    x, y = rng.standard_normal((n, case["d"])), rng.standard_normal((n, case["q"]))
    dist = cdist(x, x)
    k = int(rng.integers(2, (n - 1) // 2))  # label measures read Y only; tested above
    scaled = np.ldexp(dist, case["scale_x"])
    my = np.ldexp(y, case["scale_y"])
    assert _score(scaled, my, k, None, None, "precomputed") == _score(dist, y, k, None, None, "precomputed")
    for before, after in zip(_rank_tables(dist, y, "precomputed"), _rank_tables(scaled, my, "precomputed")):
        np.testing.assert_array_equal(before, after)


@settings(max_examples=200, deadline=None)
@given(case=cases, shift=st.floats(-1e3, 1e3))
def test_rotations_and_translations_of_continuous_data(case, shift):
    rng = np.random.default_rng(case["seed"])
    n, d, q = case["n"], case["d"], case["q"]
    x, y, latent = rng.standard_normal((n, d)), rng.standard_normal((n, q)), rng.standard_normal((n, 2))
    labels, k = _labels(rng, n), int(rng.integers(2, (n - 1) // 2))
    rot_x = ortho_group.rvs(d, random_state=rng)
    rot_y = ortho_group.rvs(q, random_state=rng) if q > 1 else -np.eye(1)
    mx = x @ rot_x.T + shift if case["which"] != "Y" else x
    my = y @ rot_y.T - shift if case["which"] != "X" else y
    before, after = _score(x, y, k, labels, latent), _score(mx, my, k, labels, latent)
    assert before.keys() == after.keys()
    for key in before:
        assert after[key] == pytest.approx(before[key], abs=1e-12), key
    for b, a in zip(_rank_tables(x, y), _rank_tables(mx, my)):
        np.testing.assert_array_equal(b, a)
    assert knn_overlap(x, mx, k) == 1.0 and knn_overlap(y, my, k) == 1.0
