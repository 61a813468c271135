"""The compiled row pass of the engine against a plain full sort of every row (tests/naive_ranks.py).

The reference is a lexicographic sort by (distance, index) of each whole row
(``numpy.lexsort``); the cases aim at the kernel's branches: long candidate
lists (sorted, not counted), equal distances on both sides of a counted
point's column, distances closer than float32 resolution, and K = n - 2.
"""

from __future__ import annotations

import numpy as np
import pytest
from naive_ranks import full_sort_ranks, squared_distances

from harness.metrics._distances import DistanceRows
from harness.metrics._kernel import full_ranks, rank_rows


def _kernel_tables(dx: np.ndarray, dy: np.ndarray, k: int, exact: int) -> tuple[np.ndarray, np.ndarray]:
    n = len(dx)
    out_x = np.empty((n, k), dtype=np.int64)
    out_y = np.empty((n, k), dtype=np.int64)
    rank_rows(dx.copy(), dy.copy(), np.arange(n, dtype=np.int64), k, exact, out_x, out_y)
    return out_x, out_y


def _reference(dx: np.ndarray, dy: np.ndarray, k: int, exact: int) -> tuple[np.ndarray, np.ndarray]:
    rx, ox = full_sort_ranks(dx)
    ry, oy = full_sort_ranks(dy)
    want_x = np.take_along_axis(rx, oy[:, :k], 1)
    want_y = np.take_along_axis(ry, ox[:, :k], 1)
    for want in (want_x, want_y):
        want[:, exact:] = np.minimum(want[:, exact:], k + 1)
    return want_x, want_y


def _rows(points: np.ndarray) -> np.ndarray:
    return DistanceRows(points=points).block(np.arange(len(points)))


def _check(dx: np.ndarray, dy: np.ndarray, k: int, exact: int) -> None:
    got_x, got_y = _kernel_tables(dx, dy, k, exact)
    want_x, want_y = _reference(dx, dy, k, exact)
    np.testing.assert_array_equal(got_x, want_x)
    np.testing.assert_array_equal(got_y, want_y)


@pytest.mark.parametrize(("k", "exact"), [(1, 1), (10, 10), (40, 5), (298, 5), (298, 298)])
def test_duplicated_points_and_coarse_grid(k, exact):
    # Ten copies of each of 30 points (distance-0 ties next to the query) against a
    # coarse grid (many equal distances): ties everywhere, broken by index.
    r = np.random.default_rng(11)
    x = np.repeat(r.standard_normal((30, 3)), 10, axis=0)
    y = np.round(r.standard_normal((300, 2)), 1)
    _check(_rows(x), _rows(y), k, exact)
    _check(_rows(y), _rows(x), k, exact)


def test_all_points_equal_gives_long_candidate_lists():
    # Every distance is 0, so every point is a candidate: the list is longer than
    # the counting order handles and is sorted instead.
    n = 400
    x = np.zeros((n, 2))
    y = np.random.default_rng(12).standard_normal((n, 2))
    _check(_rows(x), _rows(y), 30, 10)
    _check(_rows(y), _rows(x), 30, 10)


def test_counted_ranks_with_ties_before_and_after_the_column():
    # Integer coordinates on a small range: a counted (far) point shares its distance
    # with points of smaller and of larger index, so both sides of its column matter.
    r = np.random.default_rng(13)
    x = r.integers(0, 3, (500, 4)).astype(float)
    y = r.integers(0, 4, (500, 2)).astype(float)
    _check(_rows(x), _rows(y), 12, 12)


def test_distances_within_float32_resolution():
    # A third of the distances are 2 + {0..4} * 1e-12, equal in float32 but not in float64.
    r = np.random.default_rng(14)
    n = 200
    base = np.where(
        r.random((n, n)) < 0.35, 2.0 + r.integers(0, 5, (n, n)) * 1e-12, r.uniform(0.5, 3.0, (n, n))
    )
    d = np.triu(base, 1)
    d = d + d.T
    y = r.standard_normal((n, 2))
    _check(d, squared_distances(y), 25, 25)


def test_query_rows_need_not_be_in_order():
    # Rows of a sampled set of queries, in their own order: each row knows its query.
    r = np.random.default_rng(15)
    x, y = r.standard_normal((300, 5)), r.standard_normal((300, 2))
    queries = r.permutation(300)[:50].astype(np.int64)
    dx = DistanceRows(points=x).block(queries)
    dy = DistanceRows(points=y).block(queries)
    out_x = np.empty((50, 20), dtype=np.int64)
    out_y = np.empty((50, 20), dtype=np.int64)
    rank_rows(dx, dy, queries, 20, 20, out_x, out_y)
    want_x, want_y = _reference(_rows(x), _rows(y), 20, 20)
    np.testing.assert_array_equal(out_x, want_x[queries])
    np.testing.assert_array_equal(out_y, want_y[queries])


def test_identical_points_against_a_coarse_grid_at_k_n_minus_2():
    # All data distances 0 (order by index alone) against an embedding with many equal
    # distances, curve to K = n - 2: the earlier numpy pass misplaced two neighbours here.
    x = np.zeros((300, 2))
    y = np.round(np.random.default_rng(5).standard_normal((300, 2)), 1)
    _check(_rows(x), _rows(y), 298, 5)


@pytest.mark.parametrize(
    "case", ["gaussian", "coarse grid", "duplicates", "all equal", "within float32 resolution"]
)
def test_full_rank_rows_match_full_sort(case):
    # Whole rank rows of the full-range R_NX area: the radix sort of float32 roundings
    # with equal roundings put in float64 order must give the lexicographic order.
    r = np.random.default_rng(16)
    if case == "within float32 resolution":
        n = 300
        close = 2.0 + r.integers(0, 5, (n, n)) * 1e-12
        base = np.where(r.random((n, n)) < 0.5, close, r.uniform(0, 3, (n, n)))
        d = np.triu(base, 1)
        d = d + d.T
    else:
        points = {
            "gaussian": r.standard_normal((400, 4)),
            "coarse grid": r.integers(0, 3, (400, 3)).astype(float),
            "duplicates": np.repeat(r.standard_normal((20, 2)), 20, axis=0),
            "all equal": np.zeros((100, 2)),
        }[case]
        d = squared_distances(points)
    rank, _ = full_sort_ranks(d)
    rows = np.arange(0, len(d), 3, dtype=np.int64)
    out = np.empty((len(rows), len(d)), dtype=np.int32)
    full_ranks(d[rows].copy(), rows, out)
    np.testing.assert_array_equal(out, rank[rows])


@pytest.mark.parametrize(
    ("n", "d", "k", "grid"), [(300, 2, 10, True), (300, 3, 1, False), (120, 2, 118, True)]
)
def test_neighbour_lists_are_the_heads_of_a_full_sort(n, d, k, grid):
    # nearest_neighbours (k-NN accuracy, stability) against numpy.lexsort of each whole row by
    # (distance, index), the query left out; a coarse grid makes ties at the k-th place.
    from harness.metrics._neighbours import nearest_neighbours
    from harness.metrics._standard import standard_points

    r = np.random.default_rng(n + k)
    x = r.standard_normal((n, d))
    x = np.round(x, 1) if grid else x
    among = r.random(n) < 0.8
    dist = DistanceRows(points=standard_points(x)).block(np.arange(n))
    queries = np.arange(0, n, 3)
    for mask in (None, among):
        kk = k if mask is None else min(k, int(mask.sum()) - 1)
        want = []
        for q in queries:
            row = dist[q].copy()
            if mask is not None:
                row[~mask] = np.inf
            row[q] = np.inf
            want.append(np.lexsort((np.arange(n), row))[:kk])
        np.testing.assert_array_equal(nearest_neighbours(x, kk, queries, mask), np.array(want))


def test_neighbour_lists_match_scikit_learn_without_ties():
    # Continuous data have no equal distances, so scikit-learn's exact search must agree.
    from sklearn.neighbors import NearestNeighbors

    from harness.metrics._neighbours import nearest_neighbours

    x = np.random.default_rng(5).standard_normal((400, 2))
    theirs = NearestNeighbors(n_neighbors=8, algorithm="brute").fit(x).kneighbors(return_distance=False)
    np.testing.assert_array_equal(nearest_neighbours(x, 8), theirs)
