"""Seed statistics, rank tests and fronts against SciPy and published values."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats as sps
from scipy.spatial import procrustes

from harness.compare.stats import (
    bootstrap_interval,
    critical_difference,
    embedding_stability,
    friedman_from_mean_ranks,
    friedman_permutation_pvalue,
    friedman_test,
    indistinct_groups,
    knn_overlap,
    nemenyi_q,
    pareto_front,
    rank_blocks,
    t_interval,
)
from harness.errors import InputError

# Demšar (2006), Table 5a: two-tailed Nemenyi critical values q_0.05 for k = 2..10.
DEMSAR_Q05 = {2: 1.960, 3: 2.343, 4: 2.569, 5: 2.728, 6: 2.850, 7: 2.949, 8: 3.031, 9: 3.102, 10: 3.164}


@pytest.mark.parametrize("k,q", sorted(DEMSAR_Q05.items()))
def test_nemenyi_q_matches_published_table(k, q):
    # Demšar 2006, Table 5a (values printed to three decimals)
    assert nemenyi_q(k) == pytest.approx(q, abs=1.5e-3)


def test_critical_difference_of_the_worked_example():
    # Demšar 2006, section 3.2.4 worked example, k=4 algorithms on N=14 data sets:
    # CD = 2.569 * sqrt(4*5 / (6*14)) = 1.25 (printed value; the numbers are from memory)
    assert critical_difference(4, 14) == pytest.approx(1.25, abs=0.005)
    # The formula itself with the table's q (Demšar 2006, eq. for CD)
    assert critical_difference(4, 14) == pytest.approx(nemenyi_q(4) * math.sqrt(20 / 84), rel=1e-12)


def test_friedman_of_the_worked_example_from_mean_ranks():
    # Demšar 2006 worked example (numbers from memory): mean ranks 3.143, 2.000, 2.893, 1.964 of
    # four algorithms over N=14 data sets give chi2_F = 9.28 and F_F = 3.69.
    chi2, f = friedman_from_mean_ranks([3.143, 2.000, 2.893, 1.964], 14)
    assert chi2 == pytest.approx(9.28, abs=0.01)
    assert f == pytest.approx(3.69, abs=0.01)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_friedman_matches_scipy_with_ties(seed):
    rng = np.random.default_rng(seed)
    values = rng.integers(0, 4, size=(9, 5)).astype(float)  # small integers: many ties
    res = friedman_test(rank_blocks(values))
    # scipy.stats.friedmanchisquare takes one sample per treatment (columns)
    ref = sps.friedmanchisquare(*values.T)
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert res.pvalue == pytest.approx(ref.pvalue, rel=1e-10)


def test_friedman_needs_two_datasets_and_three_methods():
    with pytest.raises(InputError, match="at least 2 datasets and 3 methods"):
        friedman_test(np.array([[1.0, 2.0], [2.0, 1.0]]))
    with pytest.raises(InputError, match="at least 2 datasets"):
        friedman_test(np.array([[1.0, 2.0, 3.0]]))


def test_block_ranks_average_ties_like_scipy():
    values = np.array([[0.9, 0.9, 0.5, 0.7], [0.1, 0.3, 0.3, 0.3]])
    # scipy.stats.rankdata(method="average"), negated because higher is better
    np.testing.assert_array_equal(rank_blocks(values), sps.rankdata(-values, axis=1))
    np.testing.assert_array_equal(rank_blocks(values, higher_is_better=False), sps.rankdata(values, axis=1))
    assert rank_blocks(values)[0, 0] == 1.5


def test_groups_of_the_worked_example():
    # Demšar 2006 worked example (from memory): at alpha = 0.05 (CD = 1.25) the best and the worst
    # mean ranks (1.964 vs 3.143, difference 1.179) are not told apart; at alpha = 0.10
    # (q_0.10 = 2.291 for k = 4, Table 5b, CD = 1.12) they are.
    ranks = [3.143, 2.000, 2.893, 1.964]
    assert indistinct_groups(ranks, critical_difference(4, 14)) == [(3, 1, 2, 0)]
    cd10 = critical_difference(4, 14, alpha=0.10)
    assert cd10 == pytest.approx(2.291 * math.sqrt(20 / 84), abs=0.002)
    # 3.143 - 2.000 = 1.143 > 1.12 as well, so the worst joins only 2.893
    assert indistinct_groups(ranks, cd10) == [(3, 1, 2), (2, 0)]


def test_groups_are_maximal_and_ordered():
    ranks = [1.0, 1.5, 3.5, 4.0, 6.0]
    # hand check (plumbing): gaps 0.5, 2.0, 0.5, 2.0 with cd 1.0
    assert indistinct_groups(ranks, 1.0) == [(0, 1), (2, 3)]
    assert indistinct_groups(ranks, 10.0) == [(0, 1, 2, 3, 4)]
    assert indistinct_groups(ranks, 0.1) == []


def test_bootstrap_interval_covers_the_true_mean():
    rng = np.random.default_rng(42)
    sample = rng.normal(loc=3.0, scale=1.0, size=60)
    low, high = bootstrap_interval(sample, seed=7)
    assert low < 3.0 < high
    # SciPy's percentile bootstrap of the mean gives the same interval up to resampling noise
    ref = sps.bootstrap(
        (sample,), np.mean, method="percentile", confidence_level=0.95, n_resamples=4000, random_state=7
    ).confidence_interval
    assert low == pytest.approx(ref.low, abs=0.05)
    assert high == pytest.approx(ref.high, abs=0.05)
    # normal theory: half-width about 1.96 * sd / sqrt(n)
    assert (high - low) / 2 == pytest.approx(1.96 * sample.std(ddof=1) / math.sqrt(60), rel=0.15)


def test_bootstrap_interval_needs_two_seeds():
    assert all(math.isnan(v) for v in bootstrap_interval([0.8]))
    assert bootstrap_interval([0.8, 0.9], seed=1) == bootstrap_interval([0.8, 0.9], seed=1)


def test_knn_overlap_counts_shared_neighbours():
    rng = np.random.default_rng(0)
    a = rng.normal(size=(50, 2))
    rot = np.array([[0.0, -1.0], [1.0, 0.0]])
    # a rotation and scaling keeps every neighbourhood (distance ranks are unchanged)
    assert knn_overlap(a, 3 * a @ rot, 5) == 1.0
    b = rng.normal(size=(50, 2))
    # against brute force with NumPy distances
    expected = []
    for i in range(50):
        da = np.argsort(np.linalg.norm(a - a[i], axis=1))[1:6]
        db = np.argsort(np.linalg.norm(b - b[i], axis=1))[1:6]
        expected.append(len(set(da) & set(db)) / 5)
    assert knn_overlap(a, b, 5) == pytest.approx(np.mean(expected))


def test_stability_uses_scipy_procrustes_over_pairs():
    rng = np.random.default_rng(1)
    embs = [rng.normal(size=(40, 2)) for _ in range(3)]
    st = embedding_stability(embs, 5)
    pairs = [(0, 1), (0, 2), (1, 2)]
    # scipy.spatial.procrustes disparity, mean over the three seed pairs
    assert st.procrustes == pytest.approx(np.mean([procrustes(embs[i], embs[j])[2] for i, j in pairs]))
    assert st.pairs == 3
    same = embedding_stability([embs[0], embs[0] * 2 + 1], 5)
    assert same.knn_overlap == 1.0 and same.procrustes == pytest.approx(0.0, abs=1e-12)
    assert math.isnan(embedding_stability([embs[0]], 5).knn_overlap)


def test_pareto_front_brute_force():
    quality = [0.9, 0.8, 0.95, 0.7, 0.9]
    cost = [1.0, 0.1, 5.0, 0.2, 2.0]
    # hand check (plumbing): (0.7, 0.2) is beaten by (0.8, 0.1); (0.9, 2.0) by (0.9, 1.0)
    assert pareto_front(quality, cost).tolist() == [True, True, True, False, False]
    ranks = [2.0, 3.0, 1.0, 4.0, 2.0]  # lower is better
    assert pareto_front(ranks, cost, higher_is_better=False).tolist() == [True, True, True, False, False]


@pytest.mark.parametrize("n", [2, 3, 5, 10, 40])
def test_t_interval_matches_scipy(n):
    x = np.random.default_rng(n).normal(0.9, 0.02, n)
    # scipy.stats.t.interval with the standard error of the mean (Student 1908)
    ref = sps.t.interval(0.95, n - 1, loc=x.mean(), scale=sps.sem(x))
    assert t_interval(x) == pytest.approx(ref, rel=1e-12)
    assert all(math.isnan(v) for v in t_interval(x[:1]))


@pytest.mark.slow
@pytest.mark.parametrize("seeds", [3, 5, 10])
def test_t_interval_covers_the_mean_of_normal_seed_scores(seeds):
    # A 95% t interval of normal data covers the true mean with probability 0.95 exactly
    # (Student 1908).  4000 trials: binomial sd sqrt(.95 * .05 / 4000) = 0.0034, so
    # [0.935, 0.965] is about +-4.4 sd (a correct interval fails this about once in 10^5).
    rng = np.random.default_rng(seeds)
    x = rng.normal(0.8, 0.01, (4000, seeds))
    covered = [low <= 0.8 <= high for low, high in map(t_interval, x)]
    assert 0.935 <= np.mean(covered) <= 0.965


def _scipy_permutation_p(ranks: np.ndarray) -> float:
    # scipy.stats.permutation_test with permutation_type="samples" shuffles the treatments
    # within each block (paired samples): the same null as ours, enumerated exactly.
    def statistic(*columns, axis=-1):
        return np.sum(np.sum(np.stack(columns), axis=axis) ** 2, axis=0)

    res = sps.permutation_test(
        tuple(ranks.T), statistic, permutation_type="samples", n_resamples=np.inf, alternative="greater"
    )
    return float(res.pvalue)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_exact_friedman_permutation_p_matches_scipy(seed):
    rng = np.random.default_rng(seed)
    ranks = rank_blocks(rng.integers(0, 3, size=(4, 3)).astype(float))  # ties included
    res = friedman_permutation_pvalue(ranks)
    assert res.exact
    assert res.pvalue == pytest.approx(_scipy_permutation_p(ranks), rel=1e-9)


def test_exact_friedman_distribution_of_the_published_table():
    # Exact null distribution of Friedman's statistic for k = 3, N = 3 (Friedman 1937; as tabled
    # in Siegel 1956, Table N; values from memory): P(chi2 >= 6.0) = 0.028, P(chi2 >= 4.667) = 0.194.
    same = np.array([[1, 2, 3], [1, 2, 3], [1, 2, 3]], float)
    near = np.array([[1, 2, 3], [1, 2, 3], [2, 1, 3]], float)
    assert friedman_test(same).statistic == pytest.approx(6.0)
    assert friedman_permutation_pvalue(same).pvalue == pytest.approx(0.028, abs=5e-4)
    assert friedman_test(near).statistic == pytest.approx(4.667, abs=1e-3)
    assert friedman_permutation_pvalue(near).pvalue == pytest.approx(0.194, abs=5e-4)


def test_monte_carlo_friedman_p_is_seeded_never_zero_and_near_the_exact_one():
    ranks = np.array([[1, 2, 3, 4, 5]] * 3, float)
    mc = friedman_permutation_pvalue(ranks, exact_limit=0, draws=999, seed=3)
    # Phipson & Smyth 2010: (1 + hits) / (draws + 1); no draw beats perfect agreement here
    assert not mc.exact and mc.pvalue >= 1 / 1000
    assert mc == friedman_permutation_pvalue(ranks, exact_limit=0, draws=999, seed=3)
    rng = np.random.default_rng(9)
    ranks = rank_blocks(rng.random((3, 5)))
    exact = friedman_permutation_pvalue(ranks)
    mc = friedman_permutation_pvalue(ranks, exact_limit=0, draws=19_999, seed=1)
    # binomial sd of a Monte Carlo p from 20000 draws is at most 0.0036
    assert exact.exact and mc.pvalue == pytest.approx(exact.pvalue, abs=0.015)


def test_friedman_result_carries_the_permutation_p_and_hides_asymptotics_at_small_n():
    res = friedman_test(np.array([[1, 2, 3], [1, 2, 3]], float))
    # Iman-Davenport's F is infinite here; its p of 0 is not what decisions use
    assert math.isinf(res.iman_davenport)
    assert res.permutation.pvalue == pytest.approx(1 / 6)  # 1 of the 3! orders of the second block
    assert not res.asymptotic_ok


@pytest.mark.slow
def test_permutation_friedman_holds_its_level_with_few_datasets():
    # Under the null (independent random rank orders per dataset) a level-0.05 test rejects at most
    # 5% of the time.  4000 trials per (N, k): binomial sd 0.0034 at 5%, so the bound 6% is about
    # 2.9 sd above the level (the exact test's size is at most 5%, usually less by discreteness).
    rng = np.random.default_rng(2024)
    rates = {}
    for n_blocks in range(2, 7):
        for k in range(3, 9):
            ranks = np.argsort(rng.random((4000, n_blocks, k)), axis=2) + 1.0
            rejected = [friedman_permutation_pvalue(r).pvalue < 0.05 for r in ranks]
            rates[n_blocks, k] = float(np.mean(rejected))
    print("\nN k rejection-rate")
    for (n_blocks, k), rate in rates.items():
        print(n_blocks, k, f"{rate:.4f}")
    assert max(rates.values()) <= 0.06, rates
