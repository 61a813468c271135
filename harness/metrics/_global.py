"""Distance-preservation measures over pairs of points: stress, Sammon stress, Shepard and latent ρ.

Exact over all ``n (n - 1) / 2`` pairs up to a size threshold; above it, from a
seeded sample of pairs drawn uniformly with replacement from all pairs.  The
sampled pairs are independent draws from the finite set of pairs of *this*
data set, so the interval is about the exact all-pairs value of this data set.
The 95% interval comes from the delete-a-group jackknife (Efron 1982) with 20
groups and a Student t quantile: it covers the scale fitted inside stress and
Sammon stress and the re-ranking inside Spearman's correlation without any
formula per measure.  The 20 replicates are computed exactly without re-fitting
or re-ranking 95% of the sample 20 times: stresses from group sums of the full
fit's residuals, Spearman's correlation from ranks computed once (an item's
rank without a group is its rank less the group's items below it).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

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

    The Pearson correlation of the average ranks, as :func:`scipy.stats.spearmanr` defines it.

    Raises
    ------
    ValueError
        When either list is constant (the correlation is undefined).
    """
    return rank_correlation(average_ranks(a), average_ranks(b), what)


def average_ranks(a: np.ndarray) -> np.ndarray:
    """1-based ranks with ties given their mean rank (``scipy.stats.rankdata(a, "average")``)."""
    return _ranks_of(_sorted_ranks(a))


def rank_correlation(ra: np.ndarray, rb: np.ndarray, what: str) -> float:
    """Pearson correlation of two rank lists; ``what`` names the measure when it is undefined."""
    x = ra - ra.mean()
    y = rb - rb.mean()
    sxx, syy = float(x @ x), float(y @ y)
    if sxx == 0.0 or syy == 0.0:
        raise ValueError(f"{what} is undefined: one set of distances is constant")
    return float(np.clip(float(x @ y) / np.sqrt(sxx * syy), -1.0, 1.0))


def _condensed(points: np.ndarray | None, matrix: np.ndarray | None) -> np.ndarray:
    if matrix is None:
        return pdist(points)
    n = matrix.shape[0]
    return np.concatenate([matrix[i, i + 1 :] for i in range(n - 1)]).astype(np.float64)


def _halfwidth(leave_out: np.ndarray) -> float:
    """95% half-width from delete-a-group jackknife replicates (Efron 1982), Student t quantile."""
    m = len(leave_out)
    var = (m - 1) / m * np.sum((leave_out - leave_out.mean()) ** 2)
    return float(stats.t.ppf(0.975, m - 1) * np.sqrt(var))


def _groups(n_items: int) -> list[np.ndarray]:
    """The jackknife groups: :data:`JACKKNIFE_GROUPS` consecutive runs of the sampled pairs."""
    return np.array_split(np.arange(n_items), JACKKNIFE_GROUPS)


def _kept_sums(*products: np.ndarray) -> list[np.ndarray]:
    """For each elementwise product, its sum over all pairs but one group, for every group."""
    out = []
    for p in products:
        per_group = np.array([p[g].sum() for g in _groups(len(p))])
        out.append(p.sum() - per_group)
    return out


def _refit_residual(rr: np.ndarray, re: np.ndarray, ee: np.ndarray, shift: np.ndarray) -> np.ndarray:
    """``sum (r - shift e)^2`` over kept pairs from ``sum r^2``, ``sum r e`` and ``sum e^2`` there."""
    return rr - 2.0 * shift * re + shift * shift * ee


def _stress_leave_out(d: np.ndarray, e: np.ndarray) -> np.ndarray:
    """Stress-1 without each group, from sums of the full fit's residuals (no re-fit per group).

    With ``r = d - s e`` at the full scale ``s``, the residual over kept pairs
    at their own best scale ``t`` is exactly
    ``sum r^2 - 2 (t - s) sum r e + (t - s)^2 sum e^2`` there, which has no
    cancellation when the stress is near 0.
    """
    s = float(d @ e) / float(e @ e)
    r = d - s * e
    rr, re, ee, dd, de = _kept_sums(r * r, r * e, e * e, d * d, d * e)
    return np.sqrt(_refit_residual(rr, re, ee, de / ee - s) / dd)


def _sammon_leave_out(d: np.ndarray, e: np.ndarray) -> np.ndarray:
    """Sammon stress without each group, by the same residual identity with weights ``1 / d``."""
    keep = d > 0
    d, e = d[keep], e[keep]
    w = 1.0 / d
    s = float(e.sum()) / float(np.sum(e * e * w))
    r = d - s * e
    # Groups are over all sampled pairs (as the replicates that drop them); zero-distance pairs add 0.
    full = np.zeros(len(keep))
    sums = []
    for p in (r * r * w, r * e * w, e * e * w, d, e):
        full[:] = 0.0
        full[keep] = p
        sums.append(full.copy())
    rr, re, ee, dd, es = _kept_sums(*sums)
    return _refit_residual(rr, re, ee, es / ee - s) / dd


def _sorted_ranks(a: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sort order, each item's place in it, and each sorted place's tie block ``[first, last)``.

    The order inside a block of ties is arbitrary: everything read from it counts whole blocks
    (the compiled radix sort gives index order there, several times faster than ``numpy.argsort``).
    """
    from ._kernel import sort_order, tie_blocks  # numba loads on first use, not with the package

    values = np.ascontiguousarray(a, dtype=np.float64)
    order = sort_order(values)
    place, first, last = tie_blocks(values, order)
    return order, place, first, last


def _ranks_without(ranked: tuple[np.ndarray, ...], low: int, high: int) -> np.ndarray:
    """Average ranks (by item) among the items outside ``[low, high)``; those inside get garbage."""
    order, place, first, last = ranked
    out = np.concatenate([[0], np.cumsum((order >= low) & (order < high), dtype=np.int64)])
    # kept items before the tie block, plus the mean place among the kept items of the block
    before = first - out[first]
    inside = (last - first) - (out[last] - out[first])
    return (before + (inside + 1) / 2.0)[place]


def _spearman_leave_out(
    a: np.ndarray,
    b: np.ndarray,
    what: str,
    ranked_a: tuple[np.ndarray, ...] | None = None,
    ranked_b: tuple[np.ndarray, ...] | None = None,
) -> np.ndarray:
    """Spearman's rho without each group, ranking once (exactly the re-ranked values).

    Without group ``G`` an item's average rank counts only the items outside
    ``G``: along the one sorted order, the kept items before its tie block plus
    half of the kept items in it, read off a running count of ``G``'s members.
    """
    ranked = (
        _sorted_ranks(a) if ranked_a is None else ranked_a,
        _sorted_ranks(b) if ranked_b is None else ranked_b,
    )
    out = np.empty(JACKKNIFE_GROUPS)
    keep = np.ones(len(a), dtype=bool)
    for g, members in enumerate(_groups(len(a))):
        low, high = int(members[0]), int(members[-1]) + 1
        keep[low:high] = False
        x, y = (_ranks_without(r, low, high)[keep] for r in ranked)
        keep[low:high] = True
        x -= x.mean()
        y -= y.mean()
        sxx, syy = float(x @ x), float(y @ y)
        if sxx == 0.0 or syy == 0.0:
            raise ValueError(f"{what} is undefined: one set of distances is constant")
        out[g] = float(x @ y) / np.sqrt(sxx * syy)
    return out


@dataclass(frozen=True)
class DataPairs:
    """The data's side of the pair measures: which pairs, their data (and latent) distances, ranked.

    It depends only on the data and the scoring settings, so a run computes it
    once per dataset and every cell of that dataset reads it.

    Attributes
    ----------
    exact : bool
        All ``n (n - 1) / 2`` pairs in :func:`scipy.spatial.distance.pdist` order; else a sample.
    i, j : ndarray of int or None
        The sampled pairs (``None`` when exact).
    d, d_ranks : ndarray
        Data distance of each pair and its average rank.
    d_sorted : tuple of ndarray or None
        :func:`_sorted_ranks` of ``d`` for the jackknife (sampled pairs only).
    lat, lat_ranks, lat_sorted : ndarray or None
        The same for the latent coordinates, when the data have them.
    """

    exact: bool
    i: np.ndarray | None
    j: np.ndarray | None
    d: np.ndarray
    d_ranks: np.ndarray
    d_sorted: tuple[np.ndarray, ...] | None = None
    lat: np.ndarray | None = None
    lat_ranks: np.ndarray | None = None
    lat_sorted: tuple[np.ndarray, ...] | None = None


def data_pairs(
    x_points: np.ndarray | None,
    x_matrix: np.ndarray | None,
    latent: np.ndarray | None,
    n: int,
    *,
    pair_sample_above: int,
    n_pairs: int,
    seed: int,
    memory_bytes: int,
) -> DataPairs:
    """The pairs the global measures use and everything about them that needs only the data.

    Parameters are those of :func:`global_measures` (``n`` is the number of points).
    """
    n_all = n * (n - 1) // 2
    exact = n <= pair_sample_above
    if exact and EXACT_BYTES_PER_PAIR * n_all > memory_bytes:
        log.info("all %d pairs need more than the memory budget; sampling %d pairs", n_all, n_pairs)
        exact = False
    if exact:
        i = j = None
        d = _condensed(x_points, x_matrix)
        lat = pdist(latent) if latent is not None else None
    else:
        rng = np.random.default_rng(seed)
        i = rng.integers(0, n, size=n_pairs)
        j = rng.integers(0, n - 1, size=n_pairs)
        j += j >= i  # uniform over the other n - 1 points
        d = pair_distances(x_points, x_matrix, i, j)
        lat = pair_distances(latent, None, i, j) if latent is not None else None
    d_sorted = _sorted_ranks(d)
    lat_sorted = None if lat is None else _sorted_ranks(lat)
    return DataPairs(
        exact,
        i,
        j,
        d,
        _ranks_of(d_sorted),
        None if exact else d_sorted,
        lat,
        None if lat_sorted is None else _ranks_of(lat_sorted),
        None if exact else lat_sorted,
    )


def _ranks_of(ranked: tuple[np.ndarray, ...]) -> np.ndarray:
    _, place, first, last = ranked
    return ((first + last + 1) / 2.0)[place]


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
    pairs: DataPairs | None = None,
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
    pairs : DataPairs, optional
        The data's side made by :func:`data_pairs` with these settings (computed here when absent).

    Returns
    -------
    values : dict of str to float
    halfwidths : dict of str to float
        95% half-widths; empty when the values are exact.
    """
    if pairs is None:
        pairs = data_pairs(
            x_points,
            x_matrix,
            latent,
            y.shape[0],
            pair_sample_above=pair_sample_above,
            n_pairs=n_pairs,
            seed=seed,
            memory_bytes=memory_bytes,
        )
    d, lat = pairs.d, pairs.lat
    if pairs.exact:
        e = pdist(y)
    else:
        assert pairs.i is not None and pairs.j is not None
        e = pair_distances(y, None, pairs.i, pairs.j)
    e_ranked = _sorted_ranks(e)
    e_ranks = _ranks_of(e_ranked)
    values = {
        "stress": stress(d, e),
        "sammon_stress": sammon_stress(d, e),
        "shepard_spearman": rank_correlation(pairs.d_ranks, e_ranks, "shepard_spearman"),
    }
    if lat is not None:
        assert pairs.lat_ranks is not None
        values["latent_spearman"] = rank_correlation(pairs.lat_ranks, e_ranks, "latent_spearman")
    halfwidths: dict[str, float] = {}
    if not pairs.exact:
        replicates = {
            "stress": _stress_leave_out(d, e),
            "sammon_stress": _sammon_leave_out(d, e),
            "shepard_spearman": _spearman_leave_out(d, e, "shepard_spearman", pairs.d_sorted, e_ranked),
        }
        if lat is not None:
            replicates["latent_spearman"] = _spearman_leave_out(
                lat, e, "latent_spearman", pairs.lat_sorted, e_ranked
            )
        halfwidths = {name: _halfwidth(r) for name, r in replicates.items()}
    return values, halfwidths
