"""Neighbourhood measures estimated from sampled query points."""

from __future__ import annotations

import numpy as np
import pytest

from harness.metrics import score


@pytest.fixture(scope="module")
def data() -> tuple[np.ndarray, np.ndarray]:
    # A 2-D sheet with a little noise in 8 more dimensions, embedded by its
    # noisy sheet coordinates: neighbourhoods partly kept, so no term is degenerate.
    rng = np.random.default_rng(7)
    sheet = rng.uniform(-1, 1, (3000, 2))
    x = np.hstack([sheet, 0.05 * rng.standard_normal((3000, 8))])
    y = sheet + 0.02 * rng.standard_normal((3000, 2))
    return x, y


def test_estimate_is_marked_and_exact_when_all_points_sampled(data):
    x, y = data
    x, y = x[:300], y[:300]
    exact = score(x, y, ks=[10], pair_sample_above=0, n_pairs=100)
    est = score(x, y, ks=[10], pair_sample_above=0, n_pairs=100, estimate_above=100, n_queries=120)
    assert "trustworthiness@10" in est.estimated and "rnx_auc" in est.estimated
    assert "trustworthiness@10" not in exact.estimated
    # Asking for every point gives the exact computation.
    same = score(x, y, ks=[10], pair_sample_above=0, n_pairs=100, estimate_above=100, n_queries=300)
    assert same.values == exact.values


@pytest.mark.slow
def test_sampled_intervals_cover_exact_value(data):
    # Mean of per-point terms from a simple random sample: the 95% interval
    # mean ± 1.96 sd / sqrt(m) (with finite-population correction) should cover
    # the exact value in about 95 of 100 seeded trials; require at least 90.
    x, y = data
    exact = score(x, y, ks=[10], pair_sample_above=0, n_pairs=100).values
    names = ("trustworthiness@10", "continuity@10", "knn_recall@10", "mrre_data@10", "rnx_auc@10", "rnx_auc")
    covered = dict.fromkeys(names, 0)
    for seed in range(100):
        res = score(
            x, y, ks=[10], seed=seed, pair_sample_above=0, n_pairs=100, estimate_above=1000, n_queries=500
        )
        for name in names:
            covered[name] += abs(res.values[name] - exact[name]) <= res.halfwidths[name]
    assert all(c >= 90 for c in covered.values()), dict(covered)
