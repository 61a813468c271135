"""Statistics over seeds and datasets: intervals, stability, rank tests, fronts.

Everything here takes plain arrays or tables and returns plain values, so the
report and the command line can share it and the tests can hold it against SciPy.

Sources
-------
- Friedman test: Friedman (1937), "The use of ranks to avoid the assumption of
  normality implicit in the analysis of variance", JASA 32; its F form: Iman and
  Davenport (1980), "Approximations of the critical region of the Friedman
  statistic", Comm. Stat. A 9.  Both are asymptotic: with few datasets they reject
  a true null too often, so the p-value used for decisions is a permutation one
  (exact enumeration of within-dataset rank orders when that is small, else a
  seeded Monte Carlo with ``(1 + hits) / (draws + 1)``, Phipson and Smyth 2010).
- Nemenyi critical difference and the use of these tests across datasets:
  Demšar (2006), "Statistical comparisons of classifiers over multiple data sets", JMLR 7.
- Interval of the mean over seeds: Student (1908), "The probable error of a mean",
  Biometrika 6; the percentile bootstrap (Efron and Tibshirani 1993) undercovers
  with a handful of seeds and is kept only for callers that ask for it.
- Procrustes disparity: ``scipy.spatial.procrustes`` (Gower 1975).
"""

from __future__ import annotations

import functools
import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats as _sps
from scipy.spatial import procrustes

from ..errors import InputError
from ..metrics import knn_overlap as neighbour_overlap
from ..metrics import knn_overlap_pairs

#: Resamples of the percentile bootstrap; enough for stable 2.5% / 97.5% quantiles.
BOOTSTRAP_RESAMPLES = 4000
#: Monte Carlo draws of the permutation Friedman test; the smallest p it can give is 1 / 20000.
PERMUTATION_DRAWS = 19_999
#: The permutation Friedman test enumerates every rank order when there are at most this many.
EXACT_ARRANGEMENTS = 200_000
#: Fewest datasets at which the asymptotic chi-square and F p-values are shown (Demšar 2006: "N > 10").
ASYMPTOTIC_MIN_DATASETS = 10


# ---------------------------------------------------------------- seeds


def bootstrap_interval(
    values: ArrayLike,
    *,
    level: float = 0.95,
    resamples: int = BOOTSTRAP_RESAMPLES,
    seed: int = 0,
) -> tuple[float, float]:
    """Percentile bootstrap interval of the mean.

    With a handful of values it covers the mean far less often than its level
    (a "95%" interval of 3 normal values covers about 74% of the time), which is
    why seed intervals use :func:`t_interval`; this one is for many values.

    Parameters
    ----------
    values : array-like of float
        One value per seed; NaN values are left out.
    level : float
        Coverage of the interval (0.95 for a 95% interval).
    resamples : int
        Bootstrap resamples.
    seed : int
        Seed of the resampling, so the same scores always give the same interval.

    Returns
    -------
    (low, high) : tuple of float
        ``(nan, nan)`` with fewer than two values: one seed says nothing about spread.
    """
    x = np.asarray(values, dtype=float)
    x = x[np.isfinite(x)]
    if x.size < 2:
        return (math.nan, math.nan)
    rng = np.random.default_rng(seed)
    means = x[rng.integers(0, x.size, size=(resamples, x.size))].mean(axis=1)
    tail = (1.0 - level) / 2.0
    low, high = np.quantile(means, [tail, 1.0 - tail])
    return (float(low), float(high))


def t_interval(values: ArrayLike, *, level: float = 0.95) -> tuple[float, float]:
    """Student t interval of the mean (Student 1908): mean ± t_{n-1} sd / sqrt(n).

    Parameters
    ----------
    values : array-like of float
        One value per seed; NaN values are left out.
    level : float
        Coverage of the interval (0.95 for a 95% interval).

    Returns
    -------
    (low, high) : tuple of float
        ``(nan, nan)`` with fewer than two values.  When every seed gave the same
        value the interval has zero width: the seeds show no spread to measure.
    """
    x = np.asarray(values, dtype=float)
    x = x[np.isfinite(x)]
    if x.size < 2:
        return (math.nan, math.nan)
    mean = float(x.mean())
    half = float(_sps.t.ppf(0.5 + level / 2.0, x.size - 1) * x.std(ddof=1) / math.sqrt(x.size))
    return (mean - half, mean + half)


def knn_overlap(a: np.ndarray, b: np.ndarray, k: int, *, queries: np.ndarray | None = None) -> float:
    """Mean share of the k nearest neighbours two embeddings of the same points agree on.

    Neighbours follow the measures' rule: ties in distance broken by index, the
    point itself never its own neighbour (:func:`harness.metrics.knn_overlap`).

    Parameters
    ----------
    a, b : ndarray of shape (n, d)
        Two embeddings of the same n points (rows match).
    k : int
        Neighbourhood size (the point itself is not its own neighbour).
    queries : ndarray of int, optional
        Indices of the points whose neighbourhoods are compared (all when omitted).

    Returns
    -------
    float
        In [0, 1]; 1 when every point has the same k neighbours in both.
    """
    n = a.shape[0]
    if b.shape[0] != n:
        raise InputError("embeddings", f"expected the same number of rows, got {n} and {b.shape[0]}")
    if not 1 <= k < n:
        raise InputError("k", f"expected 1 <= k < n = {n}, got {k}")
    return neighbour_overlap(a, b, k, queries)


@dataclass(frozen=True)
class Stability:
    """How much an embedding moves between seeds.

    Attributes
    ----------
    knn_overlap : float
        Mean over seed pairs of :func:`knn_overlap` (1 = the same neighbourhoods).
    procrustes : float
        Mean over seed pairs of the Procrustes disparity after the best translation,
        scaling, rotation and reflection (0 = the same shape).
    pairs : int
        Seed pairs compared.
    sampled : bool
        Neighbourhoods were compared on sampled query points (an estimate).
    """

    knn_overlap: float
    procrustes: float
    pairs: int
    sampled: bool = False


def embedding_stability(
    embeddings: Sequence[np.ndarray], k: int, *, max_queries: int = 2000, seed: int = 0
) -> Stability:
    """Agreement between the embeddings that different seeds gave the same data.

    Parameters
    ----------
    embeddings : sequence of ndarray of shape (n, d)
        One embedding per seed, rows in the same order.
    k : int
        Neighbourhood size for the overlap.
    max_queries : int
        Above this many points the overlap is estimated on this many sampled points.
    seed : int
        Seed of that sample.

    Returns
    -------
    Stability
        NaN values when fewer than two embeddings are given.
    """
    embs = [np.asarray(e, dtype=float) for e in embeddings]
    if len(embs) < 2:
        return Stability(math.nan, math.nan, 0)
    n = embs[0].shape[0]
    queries = None
    if n > max_queries:
        queries = np.sort(np.random.default_rng(seed).choice(n, size=max_queries, replace=False))
    if not 1 <= k < n:
        raise InputError("k", f"expected 1 <= k < n = {n}, got {k}")
    if any(e.shape[0] != n for e in embs):
        raise InputError("embeddings", f"expected the same number of rows, got {[e.shape[0] for e in embs]}")
    overlaps = knn_overlap_pairs(embs, k, queries)
    # identical embeddings (copies of a seed-free fit) have the same shape: disparity 0
    pairs = itertools.combinations(embs, 2)
    disparities = [0.0 if np.array_equal(a, b) else _disparity(a, b) for a, b in pairs]
    return Stability(
        float(np.mean(overlaps)),
        float(np.nanmean(disparities)) if np.isfinite(disparities).any() else math.nan,
        len(overlaps),
        queries is not None,
    )


def _disparity(a: np.ndarray, b: np.ndarray) -> float:
    try:
        return float(procrustes(a, b)[2])
    except ValueError:
        # A collapsed embedding (all points equal) has no shape to match.
        return math.nan


# ---------------------------------------------------------------- ranks and tests


def rank_blocks(values: np.ndarray, higher_is_better: bool = True) -> np.ndarray:
    """Rank the treatments within each block (row); 1 = best, ties share the average rank.

    Parameters
    ----------
    values : ndarray of shape (n_blocks, n_treatments)
    higher_is_better : bool

    Returns
    -------
    ndarray of the same shape
        The same as ``scipy.stats.rankdata(-values, axis=1)`` when higher is better.
    """
    v = np.asarray(values, dtype=float)
    return _sps.rankdata(-v if higher_is_better else v, method="average", axis=1)


@dataclass(frozen=True)
class PermutationPValue:
    """A permutation p-value of the Friedman statistic.

    Attributes
    ----------
    pvalue : float
        Exact share of rank orders at least as extreme, or the Monte Carlo
        ``(1 + hits) / (draws + 1)``; never 0.
    exact : bool
        Every rank order was enumerated.
    draws : int
        Rank orders enumerated, or Monte Carlo draws.
    """

    pvalue: float
    exact: bool
    draws: int

    @property
    def method(self) -> str:
        """``exact permutation`` or ``Monte Carlo permutation, 19999 draws``."""
        return "exact permutation" if self.exact else f"Monte Carlo permutation, {self.draws} draws"


def friedman_permutation_pvalue(
    ranks: ArrayLike,
    *,
    draws: int = PERMUTATION_DRAWS,
    seed: int = 0,
    exact_limit: int = EXACT_ARRANGEMENTS,
) -> PermutationPValue:
    """P-value of Friedman's statistic when every block's ranks are in random order.

    Under the null hypothesis the k ranks of each block are exchangeable, so
    each block's observed ranks (ties included) are permuted independently and
    the statistic ``sum_j (sum_i r_ij)^2`` (a monotone function of Friedman's
    chi-square with or without the tie correction) is compared with its
    observed value.  The first block is held fixed: relabelling the treatments
    leaves the statistic unchanged.

    Parameters
    ----------
    ranks : array-like of shape (N, k)
        Within-block ranks.
    draws : int
        Monte Carlo draws when enumeration is too large.
    seed : int
        Seed of the Monte Carlo draws.
    exact_limit : int
        Enumerate when ``(k!)^(N-1)`` is at most this.

    Returns
    -------
    PermutationPValue
    """
    r = np.asarray(ranks, dtype=float)
    observed = float(np.sum(r.sum(axis=0) ** 2))
    key = tuple(sorted(tuple(row) for row in np.sort(r, axis=1)))
    null, exact = _friedman_null(key, draws, seed, exact_limit)
    tolerance = 1e-9 * max(1.0, observed)
    hits = int(null.size - np.searchsorted(null, observed - tolerance, side="left"))
    if exact:
        return PermutationPValue(hits / null.size, True, int(null.size))
    return PermutationPValue((1 + hits) / (draws + 1), False, draws)


@functools.lru_cache(maxsize=64)
def _friedman_null(
    rows: tuple[tuple[float, ...], ...], draws: int, seed: int, exact_limit: int
) -> tuple[np.ndarray, bool]:
    """Sorted null statistics for blocks with these (sorted) rank rows, and whether they are exact."""
    blocks = np.asarray(rows, dtype=float)
    n, k = blocks.shape
    if math.factorial(k) ** (n - 1) <= exact_limit:
        orders = np.array(list(itertools.permutations(range(k))))
        sums = blocks[:1]
        for row in blocks[1:]:
            sums = (sums[:, None, :] + row[orders][None, :, :]).reshape(-1, k)
        exact = True
    else:
        rng = np.random.default_rng(seed)
        sums = np.tile(blocks[0], (draws, 1))
        for row in blocks[1:]:
            sums = sums + rng.permuted(np.tile(row, (draws, 1)), axis=1)
        exact = False
    null = np.sort(np.sum(sums**2, axis=1))
    null.flags.writeable = False
    return null, exact


@dataclass(frozen=True)
class FriedmanResult:
    """Friedman test over blocks (datasets) and treatments (methods).

    Attributes
    ----------
    statistic : float
        Friedman's chi-square, with the correction for ties.
    pvalue : float
        From the chi-square distribution with k - 1 degrees of freedom.
    iman_davenport : float
        Iman and Davenport's F form of the statistic (less conservative, Demšar 2006).
    iman_davenport_pvalue : float
        From F with (k - 1, (k - 1)(N - 1)) degrees of freedom.
    mean_ranks : ndarray
        Mean rank of each treatment over the blocks.
    n_blocks, n_treatments : int
    permutation : PermutationPValue
        The p-value of the statistic under random rank orders within each block;
        the one decisions use, since it holds its size at every N.

    Notes
    -----
    ``pvalue`` and ``iman_davenport_pvalue`` are asymptotic; with fewer than
    :data:`ASYMPTOTIC_MIN_DATASETS` blocks they reject a true null too often
    (Iman-Davenport: 17% at alpha = 0.05 with N = 2, k = 3), so reports show
    them only when :attr:`asymptotic_ok`.
    """

    statistic: float
    pvalue: float
    iman_davenport: float
    iman_davenport_pvalue: float
    mean_ranks: np.ndarray
    n_blocks: int
    n_treatments: int
    permutation: PermutationPValue

    @property
    def asymptotic_ok(self) -> bool:
        """Enough blocks for the chi-square and F approximations to be shown."""
        return self.n_blocks >= ASYMPTOTIC_MIN_DATASETS


def friedman_test(ranks: np.ndarray, *, seed: int = 0) -> FriedmanResult:
    """Friedman test on within-block ranks (Friedman 1937), with its permutation p-value.

    Parameters
    ----------
    ranks : ndarray of shape (N, k)
        Ranks of k treatments in each of N blocks (see :func:`rank_blocks`).
    seed : int
        Seed of the Monte Carlo permutation draws (used when enumeration is too large).

    Returns
    -------
    FriedmanResult

    Raises
    ------
    InputError
        With fewer than 2 blocks or 3 treatments: the test needs both.
    """
    r = np.asarray(ranks, dtype=float)
    if r.ndim != 2 or r.shape[0] < 2 or r.shape[1] < 3:
        raise InputError(
            "ranks",
            "the Friedman test needs at least 2 datasets and 3 methods, "
            f"got {r.shape[0] if r.ndim == 2 else 0} and "
            f"{r.shape[1] if r.ndim == 2 else 0}",
        )
    n, k = r.shape
    mean_ranks = r.mean(axis=0)
    chi2, _ = friedman_from_mean_ranks(mean_ranks, n)
    # Tie correction as in Hollander and Wolfe (and SciPy); 1 when no block has ties.
    ties = 0.0
    for row in r:
        _, counts = np.unique(row, return_counts=True)
        ties += float(np.sum(counts**3 - counts))
    chi2 /= 1.0 - ties / (k * (k * k - 1) * n)
    p = float(_sps.chi2.sf(chi2, k - 1))
    f = _iman_davenport(chi2, n, k)
    pf = float(_sps.f.sf(f, k - 1, (k - 1) * (n - 1))) if math.isfinite(f) else 0.0
    perm = friedman_permutation_pvalue(r, seed=seed)
    return FriedmanResult(float(chi2), p, float(f), pf, mean_ranks, n, k, perm)


def friedman_from_mean_ranks(mean_ranks: ArrayLike, n_blocks: int) -> tuple[float, float]:
    """Friedman's chi-square and Iman and Davenport's F from mean ranks (no tie correction).

    chi2_F = 12N / (k(k+1)) * (sum R_j^2 - k(k+1)^2 / 4) and
    F_F = (N-1) chi2_F / (N(k-1) - chi2_F), as written in Demšar (2006).

    Parameters
    ----------
    mean_ranks : sequence of float
        Mean rank R_j of each of the k treatments.
    n_blocks : int
        Number of blocks N.

    Returns
    -------
    (chi2_F, F_F) : tuple of float
    """
    r = np.asarray(mean_ranks, dtype=float)
    k = r.size
    chi2 = 12.0 * n_blocks / (k * (k + 1)) * (np.sum(r**2) - k * (k + 1) ** 2 / 4.0)
    return float(chi2), _iman_davenport(float(chi2), n_blocks, k)


def _iman_davenport(chi2: float, n: int, k: int) -> float:
    denom = n * (k - 1) - chi2
    return (n - 1) * chi2 / denom if denom > 0 else math.inf


def nemenyi_q(k: int, alpha: float = 0.05) -> float:
    """Critical value q_alpha of the Nemenyi test for k treatments.

    The Studentized range quantile with infinite degrees of freedom divided by
    sqrt(2) (Demšar 2006, Table 5a).
    """
    if k < 2:
        raise InputError("k", f"expected at least 2 methods, got {k}")
    return float(_sps.studentized_range.ppf(1.0 - alpha, k, np.inf) / math.sqrt(2.0))


def critical_difference(k: int, n_blocks: int, alpha: float = 0.05) -> float:
    """Nemenyi critical difference of mean ranks: q_alpha sqrt(k(k+1) / (6N)) (Demšar 2006)."""
    if n_blocks < 1:
        raise InputError("datasets", f"expected at least 1 dataset, got {n_blocks}")
    return nemenyi_q(k, alpha) * math.sqrt(k * (k + 1) / (6.0 * n_blocks))


def indistinct_groups(mean_ranks: ArrayLike, cd: float) -> list[tuple[int, ...]]:
    """Maximal runs of treatments whose mean ranks differ by less than ``cd``.

    Parameters
    ----------
    mean_ranks : sequence of float
    cd : float
        Critical difference.

    Returns
    -------
    list of tuple of int
        Indices into ``mean_ranks``, each tuple sorted best first; only groups of
        two or more, none contained in another.
    """
    r = np.asarray(mean_ranks, dtype=float)
    order = np.argsort(r, kind="stable")
    groups: list[tuple[int, ...]] = []
    last_end = -1
    for i in range(len(order)):
        j = i
        while j + 1 < len(order) and r[order[j + 1]] - r[order[i]] < cd:
            j += 1
        if j > i and j > last_end:
            groups.append(tuple(int(x) for x in order[i : j + 1]))
            last_end = j
    return groups


# ---------------------------------------------------------------- fronts


def pareto_front(quality: ArrayLike, cost: ArrayLike, *, higher_is_better: bool = True) -> np.ndarray:
    """Points no other point beats on both quality and cost.

    Parameters
    ----------
    quality : sequence of float
    cost : sequence of float
        Lower is better (fit seconds).
    higher_is_better : bool
        Direction of ``quality``.

    Returns
    -------
    ndarray of bool
        True for points on the front; NaN points are never on it.
    """
    q = np.asarray(quality, dtype=float)
    c = np.asarray(cost, dtype=float)
    if not higher_is_better:
        q = -q
    valid = np.isfinite(q) & np.isfinite(c)
    front = np.zeros(q.size, dtype=bool)
    for i in np.flatnonzero(valid):
        other = valid & (q >= q[i]) & (c <= c[i]) & ((q > q[i]) | (c < c[i]))
        front[i] = not other.any()
    return front
