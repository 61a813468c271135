"""Neighbourhood measures from the engine's rank tables, as means of per-point terms.

Every local measure is a mean over query points of a per-point term, which is
what lets the same code give exact values (all points) and sampled estimates
with a confidence interval (a seeded sample of points).

Per-point terms, for point ``i`` with ranks ``rho`` (data) and ``r`` (embedding):

* trustworthiness (Venna & Kaski 2001, scikit-learn normalisation):
  ``1 - 2 / (k (2n - 3k - 1)) * sum over embedding k-NN j of max(0, rho_ij - k)``
* continuity: the same with the two spaces swapped.
* k-NN recall: ``|data k-NN ∩ embedding k-NN| / k``.
* MRRE (Lee & Verleysen 2009), with ``H_k = sum_{l=1..k} |n - 2l| / l``:
  data side ``sum over data k-NN j of |rho_ij - r_ij| / rho_ij / H_k``,
  embedding side ``sum over embedding k-NN j of |rho_ij - r_ij| / r_ij / H_k``.
* Q_NX(K) term: ``overlap_i(K) / K``; R_NX(K) = ((n-1) Q_NX(K) - K) / (n-1-K)
  (Lee & Verleysen 2009); LCMC(k) = Q_NX(k) - k / (n-1) (Chen & Buja 2009).
* rnx_auc@k: ``sum_K R_NX(K) / K / sum_K 1 / K`` for K = 1..k only, the area
  of Lee, Peluffo-Ordonez & Verleysen (2015) truncated at k; linear in the
  per-point overlaps.  Their full-range area (K = 1..n-2) is ``rnx_auc``, in
  :mod:`._rnx_area`.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from ._ranks import RankBlock, RankWalk

#: Measures computed at every k, in the order they are reported.
PER_K = ("trustworthiness", "continuity", "knn_recall", "mrre_data", "mrre_embedding", "lcmc", "rnx_auc")


@dataclass
class LocalTerms:
    """Per-point terms of all local measures for a set of query points.

    Attributes
    ----------
    terms : dict of str to ndarray
        ``"trustworthiness@10"``, ``"rnx_auc@10"`` etc.; one value per query point.
    overlap_sum : ndarray of shape (k_curve,)
        Sum over query points of ``|data K-NN ∩ embedding K-NN|`` for K = 1..k_curve.
    n_queries : int
    """

    terms: dict[str, np.ndarray]
    overlap_sum: np.ndarray
    n_queries: int


def _overlaps(rho: np.ndarray) -> np.ndarray:
    """``(b, K+1)`` table: column K holds |data K-NN ∩ embedding K-NN| (column 0 is 0).

    The ``p``-th embedding neighbour (1-based) is in both K-neighbourhoods
    exactly when ``max(p, rho_p) <= K``, so one histogram of those maxima and a
    cumulative sum give the overlap at every K.
    """
    b, k = rho.shape
    first_k = np.minimum(np.maximum(rho, np.arange(1, k + 1)), k + 1)
    hist = np.bincount((first_k + (np.arange(b) * (k + 2))[:, None]).ravel(), minlength=b * (k + 2)).reshape(
        b, k + 2
    )
    return np.cumsum(hist, axis=1)[:, : k + 1]


def _mrre_norm(n: int, k: int) -> float:
    ell = np.arange(1, k + 1)
    return float(np.sum(np.abs(n - 2 * ell) / ell))


def block_terms(
    block: RankBlock, n: int, ks: Sequence[int], k_curve: int
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Per-point terms of one block of query points.

    Parameters
    ----------
    block : RankBlock
        Rank tables with ``K >= max(max(ks), k_curve)`` columns.
    n : int
        Number of points.
    ks : sequence of int
        Neighbourhood sizes.
    k_curve : int
        Largest K of the co-ranking curve.

    Returns
    -------
    terms : dict of str to ndarray of shape (b,)
    overlap : ndarray of shape (b, k_curve)
        Overlap counts for K = 1..k_curve.
    """
    rho = block.data_rank_of_embedding_nn
    r = block.embedding_rank_of_data_nn
    overlap = _overlaps(rho)
    big_k = np.arange(1, rho.shape[1] + 1)
    rnx = ((n - 1.0) * overlap[:, 1:] / big_k - big_k) / (n - 1.0 - big_k)
    terms: dict[str, np.ndarray] = {}
    for k in ks:
        pos = np.arange(1, k + 1)
        t_norm = 2.0 / (k * (2.0 * n - 3.0 * k - 1.0))
        h = _mrre_norm(n, k)
        terms[f"trustworthiness@{k}"] = 1.0 - t_norm * np.maximum(rho[:, :k] - k, 0).sum(axis=1)
        terms[f"continuity@{k}"] = 1.0 - t_norm * np.maximum(r[:, :k] - k, 0).sum(axis=1)
        terms[f"knn_recall@{k}"] = overlap[:, k] / k
        terms[f"mrre_data@{k}"] = (np.abs(r[:, :k] - pos) / pos).sum(axis=1) / h
        terms[f"mrre_embedding@{k}"] = (np.abs(rho[:, :k] - pos) / pos).sum(axis=1) / h
        terms[f"lcmc@{k}"] = overlap[:, k] / k - k / (n - 1.0)
        terms[f"rnx_auc@{k}"] = (rnx[:, :k] / big_k[:k]).sum(axis=1) / np.sum(1.0 / big_k[:k])
    return terms, overlap[:, 1 : k_curve + 1]


def collect(blocks: Iterable[RankBlock], n: int, ks: Sequence[int], k_curve: int) -> LocalTerms:
    """Run the engine's blocks through :func:`block_terms` and gather the results.

    A :class:`RankWalk` is narrowed to exact ranks in the first ``max(ks)``
    columns: the measures read exact ranks only there, and the co-ranking
    curve only asks whether a rank is at most K.
    """
    if isinstance(blocks, RankWalk):
        blocks = blocks.exact_up_to(max(ks, default=0))
    parts: dict[str, list[np.ndarray]] = {}
    overlap_sum = np.zeros(k_curve)
    count = 0
    for block in blocks:
        terms, overlap = block_terms(block, n, ks, k_curve)
        for key, values in terms.items():
            parts.setdefault(key, []).append(values)
        overlap_sum += overlap.sum(axis=0)
        count += len(block.rows)
    return LocalTerms({key: np.concatenate(v) for key, v in parts.items()}, overlap_sum, count)


def curve_table(overlap_sum: np.ndarray, n_queries: int, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Q_NX(K) and R_NX(K) for K = 1..len(overlap_sum) from summed overlaps."""
    big_k = np.arange(1, len(overlap_sum) + 1)
    q = overlap_sum / (n_queries * big_k)
    r = ((n - 1.0) * q - big_k) / (n - 1.0 - big_k)
    return big_k, q, r
