"""Neighbourhood engine internals against a plain full sort of every distance row."""

from __future__ import annotations

import numpy as np
import pytest
from naive_ranks import full_sort_ranks, squared_distances

from harness.metrics import score
from harness.metrics._distances import DistanceRows
from harness.metrics._ranks import rank_blocks


def _tables(x_rows: DistanceRows, y_rows: DistanceRows, n: int, k: int, exact: int | None = None):
    walk = rank_blocks(x_rows, y_rows, np.arange(n), k, 512)
    if exact is not None:
        walk = walk.exact_up_to(exact)
    blocks = list(walk)
    assert np.array_equal(np.concatenate([b.rows for b in blocks]), np.arange(n))
    return (
        np.vstack([b.data_rank_of_embedding_nn for b in blocks]),
        np.vstack([b.embedding_rank_of_data_nn for b in blocks]),
    )


@pytest.mark.parametrize("integer", [False, True])
def test_threaded_sub_blocks_match_full_sort(integer):
    # n = 700 rows make several sub-blocks per block, shared between threads;
    # integer coordinates give exact ties (resolved by index) and float32 collisions.
    r = np.random.default_rng(5)
    n, k = 700, 40
    if integer:
        x, y = r.integers(0, 4, (n, 5)).astype(float), r.integers(0, 6, (n, 2)).astype(float)
    else:
        x, y = r.standard_normal((n, 6)), r.standard_normal((n, 2))
    rx, ox = full_sort_ranks(squared_distances(x))
    ry, oy = full_sort_ranks(squared_distances(y))
    rho, rr = _tables(DistanceRows(points=x), DistanceRows(points=y), n, k)
    np.testing.assert_array_equal(rho, np.take_along_axis(rx, oy[:, :k], 1))
    np.testing.assert_array_equal(rr, np.take_along_axis(ry, ox[:, :k], 1))


def test_narrowed_walk_caps_late_columns():
    # Columns from `exact` on hold min(rank, K + 1); earlier ones the exact rank.
    r = np.random.default_rng(6)
    n, k, exact = 300, 30, 7
    x, y = r.standard_normal((n, 8)), r.standard_normal((n, 2))
    rx, ox = full_sort_ranks(squared_distances(x))
    ry, oy = full_sort_ranks(squared_distances(y))
    rho, rr = _tables(DistanceRows(points=x), DistanceRows(points=y), n, k, exact)
    want_rho = np.take_along_axis(rx, oy[:, :k], 1)
    want_rr = np.take_along_axis(ry, ox[:, :k], 1)
    np.testing.assert_array_equal(rho[:, :exact], want_rho[:, :exact])
    np.testing.assert_array_equal(rr[:, :exact], want_rr[:, :exact])
    np.testing.assert_array_equal(rho[:, exact:], np.minimum(want_rho[:, exact:], k + 1))
    np.testing.assert_array_equal(rr[:, exact:], np.minimum(want_rr[:, exact:], k + 1))


def test_distances_closer_than_float32_resolution():
    # A third of the distances sit at 2 + {0..4} * 1e-12 (one float32 value),
    # beyond the nearest neighbours: their ranks must still follow the float64
    # values, then the index.
    r = np.random.default_rng(7)
    n, k = 150, 20
    base = np.where(
        r.random((n, n)) < 0.35, 2.0 + r.integers(0, 5, (n, n)) * 1e-12, r.uniform(0.5, 3.0, (n, n))
    )
    d = np.triu(base, 1)
    d = d + d.T
    y = r.standard_normal((n, 2))
    rx, ox = full_sort_ranks(d)
    ry, oy = full_sort_ranks(squared_distances(y))
    rho, rr = _tables(DistanceRows(matrix=d), DistanceRows(points=y), n, k)
    np.testing.assert_array_equal(rho, np.take_along_axis(rx, oy[:, :k], 1))
    np.testing.assert_array_equal(rr, np.take_along_axis(ry, ox[:, :k], 1))


def test_values_do_not_depend_on_memory_budget():
    # Blocks of one row (tiny budget) against the default blocks and threads.
    r = np.random.default_rng(8)
    x, y = r.standard_normal((400, 5)), r.standard_normal((400, 2))
    big = score(x, y, ks=[5, 12], curve_k_max=50, pair_sample_above=0, n_pairs=100)
    small = score(x, y, ks=[5, 12], curve_k_max=50, pair_sample_above=0, n_pairs=100, memory_bytes=1)
    assert big.values == small.values
    assert big.curve.equals(small.curve)
