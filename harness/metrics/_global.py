"""Distance-preservation measures over pairs of points: stress, Sammon stress, Shepard and latent ρ.

Exact over all ``n (n - 1) / 2`` pairs up to a size threshold; above it, from a
seeded sample of pairs drawn uniformly with replacement from all pairs.  The
sampled pairs are independent draws from the finite set of pairs of *this*
data set, so the interval is about the exact all-pairs value of this data set.
The 95% interval comes from the delete-a-group jackknife (Efron 1982) with 20
groups and a Student t quantile: it covers the scale fitted inside stress and
Sammon stress and the re-ranking inside Spearman's correlation without any
formula per measure, at the cost of 20 re-evaluations on 95% of the sample.
"""

from __future__ import annotations

import functools
import logging
from collections.abc import Callable

import numpy as np
from scipy import stats
from scipy.spatial.distance import pdist

from ._distances import pair_distances

log = logging.getLogger(__name__)

#: Number of jackknife groups for sampled pairs.
JACKKNIFE_GROUPS = 20
#: Bytes per pair held by the exact path (data, embedding, latent distances and two rank arrays).
EXACT_BYTES_PER_PAIR = 48


def stress(d: np.ndarray, e: np.ndarray) -> float:
    """Kruskal stress-1 after the best uniform scaling of the embedding (Kruskal 1964).

    ``sqrt(sum (d - s e)^2 / sum d^2)`` with ``s = sum(d e) / sum(e^2)``,
    the scale that minimises it.

    Raises
    ------
    ValueError
        When all data or all embedding distances are zero.
    """
    see = float(e @ e)
    sdd = float(d @ d)
    if see == 0.0:
        raise ValueError("stress is undefined: every embedding distance is zero")
    if sdd == 0.0:
        raise ValueError("stress is undefined: every data distance is zero")
    residual = d - (float(d @ e) / see) * e
    return float(np.sqrt(residual @ residual / sdd))


def sammon_stress(d: np.ndarray, e: np.ndarray) -> float:
    """Sammon stress after the best uniform scaling (Sammon 1969).

    ``(1 / sum d) * sum (d - s e)^2 / d`` with ``s = sum(e) / sum(e^2 / d)``,
    the scale that minimises it.  Pairs with data distance 0 (duplicate points)
    are left out of both sums, where the term is undefined.

    Raises
    ------
    ValueError
        When no pair has a positive data distance, or every embedding distance
        of those pairs is zero.
    """
    keep = d > 0
    d, e = d[keep], e[keep]
    if len(d) == 0:
        raise ValueError("Sammon stress is undefined: every data distance is zero")
    weight = float(np.sum(e * e / d))
    if weight == 0.0:
        raise ValueError("Sammon stress is undefined: every embedding distance is zero")
    residual = d - (float(e.sum()) / weight) * e
    return float(np.sum(residual * residual / d) / d.sum())


def spearman(a: np.ndarray, b: np.ndarray, what: str) -> float:
    """Spearman rank correlation of two distance lists (average ranks for ties).

    Raises
    ------
    ValueError
        When either list is constant (the correlation is undefined).
    """
    if np.ptp(a) == 0.0 or np.ptp(b) == 0.0:
        raise ValueError(f"{what} is undefined: one set of distances is constant")
    return float(stats.spearmanr(a, b).statistic)


def _condensed(points: np.ndarray | None, matrix: np.ndarray | None) -> np.ndarray:
    if matrix is None:
        return pdist(points)
    n = matrix.shape[0]
    return np.concatenate([matrix[i, i + 1 :] for i in range(n - 1)]).astype(np.float64)


def _jackknife(statistic: Callable[[np.ndarray], float], n_items: int) -> float:
    """95% half-width of ``statistic(all items)`` by the delete-a-group jackknife."""
    groups = np.array_split(np.arange(n_items), JACKKNIFE_GROUPS)
    keep = np.ones(n_items, dtype=bool)
    leave_out = np.empty(len(groups))
    for g, members in enumerate(groups):
        keep[members] = False
        leave_out[g] = statistic(keep)
        keep[members] = True
    m = len(groups)
    var = (m - 1) / m * np.sum((leave_out - leave_out.mean()) ** 2)
    return float(stats.t.ppf(0.975, m - 1) * np.sqrt(var))


def global_measures(
    x_points: np.ndarray | None,
    x_matrix: np.ndarray | None,
    y: np.ndarray,
    latent: np.ndarray | None,
    *,
    pair_sample_above: int,
    n_pairs: int,
    seed: int,
    memory_bytes: int,
) -> tuple[dict[str, float], dict[str, float]]:
    """Stress, Sammon stress, Shepard correlation and (with latent) latent correlation.

    Parameters
    ----------
    x_points, x_matrix : ndarray or None
        Data coordinates, or a precomputed distance matrix (exactly one given).
    y : ndarray of shape (n, q)
        Embedding.
    latent : ndarray of shape (n, p) or None
        True latent coordinates.
    pair_sample_above : int
        Exact over all pairs when ``n <= pair_sample_above``, sampled above.
    n_pairs : int
        Number of sampled pairs.
    seed : int
        Seed of the pair sample.
    memory_bytes : int
        The exact path falls back to sampling when its pair arrays would not fit.

    Returns
    -------
    values : dict of str to float
    halfwidths : dict of str to float
        95% half-widths; empty when the values are exact.
    """
    n = y.shape[0]
    n_all = n * (n - 1) // 2
    exact = n <= pair_sample_above
    if exact and EXACT_BYTES_PER_PAIR * n_all > memory_bytes:
        log.info("all %d pairs need more than the memory budget; sampling %d pairs", n_all, n_pairs)
        exact = False
    if exact:
        d = _condensed(x_points, x_matrix)
        e = pdist(y)
        lat = pdist(latent) if latent is not None else None
    else:
        rng = np.random.default_rng(seed)
        i = rng.integers(0, n, size=n_pairs)
        j = rng.integers(0, n - 1, size=n_pairs)
        j += j >= i  # uniform over the other n - 1 points
        d = pair_distances(x_points, x_matrix, i, j)
        e = pair_distances(y, None, i, j)
        lat = pair_distances(latent, None, i, j) if latent is not None else None

    def measures(mask: np.ndarray | slice) -> dict[str, Callable[[], float]]:
        out = {
            "stress": lambda: stress(d[mask], e[mask]),
            "sammon_stress": lambda: sammon_stress(d[mask], e[mask]),
            "shepard_spearman": lambda: spearman(d[mask], e[mask], "shepard_spearman"),
        }
        if lat is not None:
            out["latent_spearman"] = lambda: spearman(lat[mask], e[mask], "latent_spearman")
        return out

    values = {name: f() for name, f in measures(slice(None)).items()}
    halfwidths: dict[str, float] = {}
    if not exact:
        for name in values:
            halfwidths[name] = _jackknife(functools.partial(_one_measure, measures, name), len(d))
    return values, halfwidths


def _one_measure(
    measures: Callable[[np.ndarray], dict[str, Callable[[], float]]], name: str, keep: np.ndarray
) -> float:
    """One measure on the pairs ``keep`` selects (a jackknife replicate)."""
    return measures(keep)[name]()
