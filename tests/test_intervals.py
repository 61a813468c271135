"""95% intervals of neighbourhood measures estimated from sampled query points."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from harness.metrics import score
from harness.metrics._intervals import Z95, term_interval, term_range, wilson_interval

N = 3000
KS = [1, 3, 10]
MEASURES = [
    f"{m}@{k}"
    for m in ("trustworthiness", "continuity", "knn_recall", "mrre_data", "mrre_embedding", "lcmc")
    for k in KS
] + ["rnx_auc"]


def test_wilson_interval_matches_the_published_formula():
    # Wilson 1927 (as written in Agresti & Coull 1998, eq. 2): 7 successes of 20.
    p, n, z = 0.35, 20, Z95
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    assert wilson_interval(p, n) == pytest.approx((centre - half, centre + half), rel=1e-12)
    # Agresti & Coull 1998 state the zero-success upper bound z^2 / (n + z^2).
    assert wilson_interval(0.0, 100) == pytest.approx((0.0, z * z / (100 + z * z)), rel=1e-12)


@pytest.mark.parametrize(
    ("successes", "n", "expected"),
    [
        (81, 263, (0.2553, 0.3662)),
        (15, 148, (0.0624, 0.1605)),
        (0, 20, (0.0, 0.1611)),
        (1, 29, (0.0061, 0.1718)),
    ],
)
def test_wilson_interval_reproduces_newcombes_worked_examples(successes, n, expected):
    # Newcombe 1998, Stat. Med. 17:857-872, Table I, score method without continuity
    # correction (values from memory, 4 decimals).
    low, high = wilson_interval(successes / n, n)
    assert (round(low, 4), round(high, 4)) == expected


def test_an_all_zero_sample_gets_a_positive_upper_bound():
    # The normal interval of 200 zeros is 0 ± 0; Wilson on k m trials is not (Wilson 1927).
    low, high, trials = term_range("knn_recall@3", N, 10)
    mean, lo, hi = term_interval(np.zeros(200), low, high, trials, N)
    assert (mean, lo) == (0.0, 0.0)
    assert hi == pytest.approx(Z95**2 / (600 / (1 - 200 / N) + Z95**2), rel=1e-12)


def test_away_from_the_ends_the_interval_is_the_normal_one():
    # Many terms in the middle of [0, 1]: the design-effect count n p(1-p)/s^2 makes the Wilson
    # interval the normal mean ± z s / sqrt(m) (Korn & Graubard 1998) up to O(1/m).
    rng = np.random.default_rng(0)
    t = rng.beta(5, 5, 2000)
    mean, lo, hi = term_interval(t, 0.0, 1.0, 10, 10**9)
    half = stats.norm.ppf(0.975) * t.std(ddof=1) / np.sqrt(len(t))
    assert (hi - lo) / 2 == pytest.approx(half, rel=1e-3)
    assert lo < mean < hi


def test_every_sampled_local_measure_has_an_interval_around_its_value():
    rng = np.random.default_rng(1)
    x = rng.standard_normal((600, 4))
    res = score(x, x[:, :2], ks=[3], pair_sample_above=0, n_pairs=100, estimate_above=100, n_queries=80)
    for key in ("trustworthiness@3", "knn_recall@3", "lcmc@3", "mrre_data@3", "rnx_auc"):
        low, high = res.intervals[key]
        assert low <= res.values[key] <= high and low < high


def embeddings() -> dict[str, tuple[np.ndarray, np.ndarray]]:
    # Invented data: a square sheet with noise in 8 more dimensions.
    rng = np.random.default_rng(7)
    sheet = rng.uniform(-1, 1, (N, 2))
    x = np.hstack([sheet, 0.05 * rng.standard_normal((N, 8))])
    return {
        "random": (x, rng.standard_normal((N, 2))),  # recall near 0, trustworthiness near 0.5
        "noisy": (x, sheet + 0.02 * rng.standard_normal((N, 2))),  # recall in the middle
        "near-exact": (np.hstack([sheet, 1e-3 * rng.standard_normal((N, 8))]), sheet),  # near 1
    }


@pytest.mark.slow
def test_query_point_intervals_cover_the_exact_value():
    # A 95% interval must cover the all-points value in about 95 of 100 seeded samples of
    # 200 query points; require at least 90 for every measure and embedding.
    table = []
    for name, (x, y) in embeddings().items():
        exact = score(x, y, ks=KS, pair_sample_above=0, n_pairs=100).values
        covered = dict.fromkeys(MEASURES, 0)
        for seed in range(100):
            res = score(
                x, y, ks=KS, seed=seed, pair_sample_above=0, n_pairs=100, estimate_above=1000, n_queries=200
            )
            for key in MEASURES:
                low, high = res.intervals[key]
                # 1e-12: equal terms can average to the exact value one rounding step away.
                covered[key] += low - 1e-12 <= exact[key] <= high + 1e-12
        table += [(key, name, exact[key], covered[key]) for key in MEASURES]
    print("\nmeasure | embedding | exact | covered/100")
    for row in table:
        print(f"{row[0]} | {row[1]} | {row[2]:.5f} | {row[3]}")
    assert all(row[3] >= 90 for row in table), [row for row in table if row[3] < 90]


def test_interval_bounds_become_scores_columns_that_are_not_measures():
    # plumbing: a cell record's intervals become <measure>_ci_low / _ci_high columns
    from harness.compare.aggregate import measure_columns
    from harness.run.folder import scores_frame

    record = {
        "key": "k",
        "cell": {"dataset": "d", "method": "m", "params": {}, "seed": 0, "use": "m"},
        "status": "ok",
        "error": "",
        "values": {"knn_recall@3": 0.0},
        "intervals": {"knn_recall@3": [0.0, 0.006]},
        "estimated": ["knn_recall@3"],
        "fit_seconds": 1.0,
        "fit_peak_mb": 1.0,
        "score_seconds": 1.0,
    }
    frame = scores_frame([record])
    assert frame.loc[0, "knn_recall@3_ci_low"] == 0.0 and frame.loc[0, "knn_recall@3_ci_high"] == 0.006
    assert "knn_recall@3_ci_high" not in measure_columns(frame)


def test_cached_scores_without_interval_bounds_are_not_trusted():
    # plumbing: scores cached before estimates carried bounds are read as missing (scored again)
    from harness.run.cache import _intervals

    assert _intervals(None) is None
    assert _intervals({"knn_recall@3": 0.004}) is None  # an old half-width
    assert _intervals({"knn_recall@3": [0.0, 0.006]}) == {"knn_recall@3": (0.0, 0.006)}
