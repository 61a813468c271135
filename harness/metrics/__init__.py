"""Quality measures of an embedding: neighbourhood, distance and label measures.

Public API: :func:`score` (everything, with estimates and intervals where
asked), :func:`evaluate` (one k, plain floats), :func:`coranking_curve`, the
:class:`MeasureResult` it returns, the catalogue :data:`MEASURES` and
:func:`knn_overlap` (neighbourhood agreement of two embeddings).

Distances are Euclidean in both spaces, or read from a square matrix for the
data when ``metric="precomputed"``.  Both spaces are standardised first (median
centre, power-of-two scale; see :mod:`._standard`), so no value depends on the
offset or magnitude of the input; ties in distance are broken by point index.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError
from ._catalogue import MEASURES, MeasureInfo, higher_is_better, measure_stem
from ._cluster import ClusterMeasures, check_backend, connect
from ._distances import DistanceRows
from ._global import JACKKNIFE_GROUPS, global_measures
from ._heldout import PREFIX as HELDOUT_PREFIX
from ._heldout import placement_measures
from ._intervals import local_estimates
from ._labels import knn_accuracy, silhouette
from ._local import PER_K, collect, curve_table
from ._memory import block_rows, default_memory_bytes
from ._neighbours import knn_overlap, knn_overlap_pairs
from ._prepared import SETTINGS, DataSide, make_data_side
from ._ranks import rank_blocks
from ._rnx_area import area_terms, rnx_area
from ._standard import standard_distances, standard_points

__all__ = [
    "HELDOUT_PREFIX",
    "MEASURES",
    "DataSide",
    "MeasureInfo",
    "MeasureResult",
    "coranking_curve",
    "evaluate",
    "higher_is_better",
    "knn_overlap",
    "knn_overlap_pairs",
    "measure_stem",
    "placement_measures",
    "pointwise",
    "prepare_data",
    "score",
]

log = logging.getLogger(__name__)

_METRICS = ("euclidean", "precomputed")


@dataclass(frozen=True)
class MeasureResult:
    """Values of the measures of one embedding.

    Attributes
    ----------
    values : dict of str to float
        Measure name (``@k`` appended for k-dependent ones) to value.
    intervals : dict of str to (float, float)
        95% confidence interval ``(lower, upper)`` of every value that is an
        estimate: Wilson score intervals for measures from sampled query points
        (see ``harness.metrics._intervals``), jackknife intervals for measures
        from sampled pairs.
    estimated : frozenset of str
        Keys of ``values`` that are estimates rather than exact.
    curve : pandas.DataFrame or None
        Columns ``K``, ``Q_NX``, ``R_NX`` for K = 1..curve_k_max.
    points : pandas.DataFrame or None
        One row per query point (every point when exact): ``point`` (its row
        index) and its own ``trustworthiness@k``, ``continuity@k`` and
        ``knn_recall@k`` terms; the mean of a column is the measure.
    """

    values: dict[str, float]
    intervals: dict[str, tuple[float, float]] = field(default_factory=dict)
    estimated: frozenset[str] = frozenset()
    curve: pd.DataFrame | None = None
    points: pd.DataFrame | None = None


def _matrix(a: object, where: str) -> np.ndarray:
    try:
        arr = np.asarray(a, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(where, f"a numeric array ({exc})") from None
    if arr.ndim != 2 or arr.shape[0] == 0 or arr.shape[1] == 0:
        raise InputError(where, f"a non-empty 2-D array, got shape {arr.shape}")
    if not np.isfinite(arr).all():
        raise InputError(where, "finite numbers only (found NaN or infinity)")
    return np.ascontiguousarray(arr)


def _inputs(X: object, Y: object, metric: str) -> tuple[np.ndarray | None, np.ndarray | None, np.ndarray]:
    """Checked inputs, standardised (see :mod:`._standard`): data points or distance matrix, embedding."""
    if metric not in _METRICS:
        raise InputError("metric", f"one of {', '.join(_METRICS)}, got {metric!r}")
    x = _matrix(X, "X")
    y = _matrix(Y, "Y")
    n = y.shape[0]
    if x.shape[0] != n:
        raise InputError("Y", f"{x.shape[0]} rows like X, got {n}")
    if metric == "precomputed":
        if x.shape != (n, n):
            raise InputError("X", f"a square distance matrix with metric='precomputed', got shape {x.shape}")
        if (x < 0).any():
            raise InputError("X", "non-negative distances")
        if not np.allclose(x, x.T, rtol=1e-12, atol=0.0):
            raise InputError("X", "a symmetric distance matrix")
        return None, standard_distances(x), standard_points(y)
    return standard_points(x), None, standard_points(y)


def _ks(ks: Iterable[Any], n: int) -> list[int]:
    try:
        given = list(ks)
        values = [int(k) for k in given]
    except (TypeError, ValueError):
        raise InputError("ks", f"a list of integers, got {ks!r}") from None
    if not values or any(int(k) != k for k in given):
        raise InputError("ks", f"a non-empty list of integers, got {ks!r}")
    for k in values:
        # scikit-learn's trustworthiness refuses k >= n/2: its normaliser
        # 2 / (n k (2n - 3k - 1)) keeps the value in [0, 1] only below that.
        if not 1 <= k < n / 2:
            raise InputError("ks", f"neighbourhood sizes with 1 <= k < n/2 = {n / 2:g}, got {k}")
    return sorted(set(values))


def _curve_k(curve_k_max: int | None, ks: Sequence[int], n: int) -> int:
    k = max(ks) if curve_k_max is None else curve_k_max
    if int(k) != k or not 1 <= k <= n - 2:
        raise InputError("curve_k_max", f"an integer with 1 <= K <= n - 2 = {n - 2}, got {k}")
    return int(k)


def _vector_labels(labels: object, n: int) -> np.ndarray:
    arr = np.asarray(labels)
    if arr.ndim != 1 or len(arr) != n:
        raise InputError("labels", f"one label per point ({n}), got shape {arr.shape}")
    return arr


def _rows(
    x_points: np.ndarray | None, x_matrix: np.ndarray | None, y: np.ndarray
) -> tuple[DistanceRows, DistanceRows]:
    data = DistanceRows(points=x_points) if x_matrix is None else DistanceRows(matrix=x_matrix)
    return data, DistanceRows(points=y)


def _local(
    data: DistanceRows,
    emb: DistanceRows,
    ks: Sequence[int],
    k_curve: int,
    queries: np.ndarray,
    memory_bytes: int,
    cluster: ClusterMeasures | None = None,
):
    n = data.n
    fixed = data.nbytes + emb.nbytes + len(queries) * (len(PER_K) * len(ks) + 1) * 8
    rows = block_rows(n, len(queries), memory_bytes, fixed)
    k = max(max(ks, default=1), k_curve)
    if cluster is not None:
        return cluster.local_terms(queries, k, rows, ks, k_curve)
    return collect(rank_blocks(data, emb, queries, k, rows), n, ks, k_curve)


@contextmanager
def _spread(
    backend: str, scheduler: str | None, data: DistanceRows, emb: DistanceRows
) -> Iterator[ClusterMeasures | None]:
    """The cluster's passes when ``backend="dask"``, else ``None`` (the local engine)."""
    if backend != "dask":
        yield None
        return
    assert scheduler is not None  # check_backend refused a dask backend without an address
    with connect(scheduler) as client:
        cluster = ClusterMeasures(client, data, emb)
        try:
            yield cluster
        finally:
            cluster.close()


def score(
    X: object,
    Y: object,
    *,
    ks: Sequence[int],
    metric: str = "euclidean",
    labels: object = None,
    latent: object = None,
    seed: int = 0,
    pair_sample_above: int = 5000,
    n_pairs: int = 200_000,
    estimate_above: int | None = None,
    n_queries: int = 2000,
    memory_bytes: int | None = None,
    curve_k_max: int | None = None,
    prepared: DataSide | None = None,
    backend: str = "local",
    scheduler: str | None = None,
) -> MeasureResult:
    """Score an embedding with every applicable measure.

    Parameters
    ----------
    X : array-like of shape (n, d), or (n, n) with ``metric="precomputed"``
        Data features, or a symmetric non-negative distance matrix.
    Y : array-like of shape (n, q)
        Embedding.
    ks : sequence of int
        Neighbourhood sizes, each ``1 <= k < n/2`` (the range in which
        trustworthiness is normalised to [0, 1], as scikit-learn enforces).
    metric : {"euclidean", "precomputed"}
        How to read ``X``.  The embedding is always Euclidean.
    labels : array-like of shape (n,), optional
        Classes; adds ``knn_accuracy@k`` and, with at least 2 classes, ``silhouette``.
    latent : array-like of shape (n, p), optional
        True coordinates; adds ``latent_spearman``.
    seed : int
        Seed of every sample (query points, pairs, cross-validation folds).
    pair_sample_above : int
        Global measures are exact over all pairs up to this many points and
        estimated from ``n_pairs`` sampled pairs above.
    n_pairs : int
        Pairs sampled for the global measures.
    estimate_above : int or None
        When given and ``n > estimate_above``, neighbourhood measures are
        estimated from ``n_queries`` sampled points (exact ranks against all n
        points).  ``None``: always exact.
    n_queries : int
        Sampled query points.
    memory_bytes : int, optional
        Memory budget of the neighbourhood engine; default a quarter of the
        available memory, between 256 MiB and 8 GiB.
    curve_k_max : int, optional
        Largest K of the co-ranking curve; default ``max(ks)``.  ``rnx_auc``
        always covers K = 1..n-2 (exact up to about 5800 points, estimated from
        sampled query points above; see :mod:`._rnx_area`), ``rnx_auc@k`` K = 1..k.
    prepared : DataSide, optional
        :func:`prepare_data` of the same ``X``, ``metric``, ``latent`` and
        settings: the data's side, made once for many embeddings of one dataset
        (the values do not change).  Refused when its size or settings differ.

    Returns
    -------
    MeasureResult

    Raises
    ------
    harness.errors.InputError
        Bad shapes, values or parameters.
    ValueError
        A measure is undefined for this input (e.g. all embedding points equal).
    """
    check_backend(backend, scheduler)
    x_points, x_matrix, y = _inputs(X, Y, metric)
    n = y.shape[0]
    if n < 4:
        raise InputError("X", f"at least 4 points, got {n}")
    ks = _ks(ks, n)
    k_curve = _curve_k(curve_k_max, ks, n)
    if labels is not None:
        labels = _vector_labels(labels, n)
    if latent is not None:
        latent = _matrix(latent, "latent")
        if latent.shape[0] != n:
            raise InputError("latent", f"{n} rows like X, got {latent.shape[0]}")
        latent = standard_points(latent)
    if n_pairs < 2 * JACKKNIFE_GROUPS:
        raise InputError("n_pairs", f"at least {2 * JACKKNIFE_GROUPS}, got {n_pairs}")
    if n_queries < 2:
        raise InputError("n_queries", f"at least 2, got {n_queries}")
    settings = dict(
        zip(SETTINGS, (seed, pair_sample_above, n_pairs, estimate_above, n_queries, memory_bytes))
    )
    if prepared is not None:
        prepared.check(n, settings)
    if memory_bytes is None:
        memory_bytes = default_memory_bytes()
    query_seed, pair_seed, area_seed = np.random.SeedSequence(seed).spawn(3)

    sampled = estimate_above is not None and n > estimate_above and n_queries < n
    if sampled:
        queries = np.sort(np.random.default_rng(query_seed).choice(n, n_queries, replace=False))
        log.info("neighbourhood measures estimated from %d of %d points", n_queries, n)
    else:
        queries = np.arange(n)
    rows = _rows(x_points, x_matrix, y)
    area_rng = np.random.default_rng(area_seed)
    area_ranks = None if prepared is None else prepared.area_ranks
    with _spread(backend, scheduler, *rows) as cluster:
        local = _local(*rows, ks, k_curve, queries, memory_bytes, cluster)
        terms = area_terms if cluster is None else cluster.area_terms
        area, area_sampled = rnx_area(*rows, queries, sampled, n_queries, area_rng, area_ranks, terms)

    values, intervals = local_estimates(local.terms, n, k_curve, sampled)
    # The full-range area (K = 1..n-2) gets its interval, when sampled, from the same rule as the others.
    area_value, area_interval = local_estimates({"rnx_auc": area}, n, n - 2, area_sampled)
    values.update(area_value)
    intervals.update(area_interval)

    g_values, g_halfwidths = global_measures(
        x_points,
        x_matrix,
        y,
        latent,
        pair_sample_above=pair_sample_above,
        n_pairs=n_pairs,
        seed=int(pair_seed.generate_state(1)[0]),
        memory_bytes=memory_bytes,
        pairs=None if prepared is None else prepared.pairs,
    )
    values.update(g_values)
    intervals.update({name: (g_values[name] - hw, g_values[name] + hw) for name, hw in g_halfwidths.items()})

    if labels is not None:
        by_label = {f"knn_accuracy@{k}": knn_accuracy(y, labels, k, seed) for k in ks}
        if len(np.unique(labels)) >= 2:
            by_label["silhouette"] = silhouette(y, labels, seed)
        # A label measure the classes cannot support is NaN with its reason logged: it is left out
        # alone, and the cell keeps every other measure.
        values.update({key: v for key, v in by_label.items() if not np.isnan(v)})

    for key, value in values.items():
        if not np.isfinite(value):
            raise ValueError(f"{key} is not a finite number ({value}) for this input")
    big_k, q, r = curve_table(local.overlap_sum, local.n_queries, n)
    curve = pd.DataFrame({"K": big_k, "Q_NX": q, "R_NX": r})
    return MeasureResult(values, intervals, frozenset(intervals), curve, _points(local.terms, queries, ks))


def prepare_data(
    X: object,
    *,
    metric: str = "euclidean",
    latent: object = None,
    seed: int = 0,
    pair_sample_above: int = 5000,
    n_pairs: int = 200_000,
    estimate_above: int | None = None,
    n_queries: int = 2000,
    memory_bytes: int | None = None,
) -> DataSide:
    """The data's side of :func:`score`, made once to score many embeddings of the same data.

    Parameters
    ----------
    X, metric, latent, seed, pair_sample_above, n_pairs, estimate_above, n_queries, memory_bytes
        As for :func:`score`; pass the same values there with ``prepared=``.

    Returns
    -------
    DataSide
        The pairs of the global measures with their data (and latent) distances
        and ranks, and, when the full-range R_NX area is exact, every point's
        data rank row (``n * n`` 4-byte integers).
    """
    rows = _matrix(X, "X").shape[0]
    x_points, x_matrix, _ = _inputs(X, np.zeros((rows, 1)), metric)
    if latent is not None:
        latent = standard_points(_matrix(latent, "latent"))
    settings = dict(
        zip(SETTINGS, (seed, pair_sample_above, n_pairs, estimate_above, n_queries, memory_bytes))
    )
    return make_data_side(x_points, x_matrix, latent, settings)


def pointwise(X: object, Y: object, k: int = 10, metric: str = "euclidean") -> pd.DataFrame:
    """Where an embedding fails: one row per point, exact (every point is a query).

    Parameters
    ----------
    X : array-like of shape (n, d), or (n, n) with ``metric="precomputed"``
    Y : array-like of shape (n, q)
    k : int
        Neighbourhood size, ``1 <= k < n/2``.
    metric : {"euclidean", "precomputed"}

    Returns
    -------
    pandas.DataFrame
        ``point``; ``trustworthiness_defect`` and ``continuity_defect``: the
        point's rank penalty of intruders (embedding neighbours from outside its
        data neighbourhood) and of missing neighbours (data neighbours pushed
        out), normalised so that their mean is ``1 - trustworthiness@k`` and
        ``1 - continuity@k`` (Venna and Kaski 2001); ``knn_recall``;
        ``intruders`` and ``missing``: how many of its k neighbours are new in
        the embedding, and how many of its data neighbours are lost (equal
        counts, as both neighbourhoods hold k points).
    """
    result = score(X, Y, ks=[k], metric=metric, pair_sample_above=4, n_pairs=40)
    pts = result.points
    assert pts is not None
    recall = pts[f"knn_recall@{k}"].to_numpy()
    lost = np.rint(k * (1.0 - recall)).astype(np.int64)
    return pd.DataFrame(
        {
            "point": pts["point"].to_numpy(),
            "trustworthiness_defect": 1.0 - pts[f"trustworthiness@{k}"].to_numpy(),
            "continuity_defect": 1.0 - pts[f"continuity@{k}"].to_numpy(),
            "knn_recall": recall,
            "intruders": lost,
            "missing": lost,
        }
    )


#: Per-point terms kept in a cell's point table (where each point fails, not only how much).
POINT_MEASURES = ("trustworthiness", "continuity", "knn_recall")


def _points(terms: dict[str, np.ndarray], queries: np.ndarray, ks: Sequence[int]) -> pd.DataFrame:
    """The per-point table: row index and the point's term of each local measure at each k."""
    columns: dict[str, np.ndarray] = {"point": queries.astype(np.int64)}
    for k in ks:
        for name in POINT_MEASURES:
            columns[f"{name}@{k}"] = terms[f"{name}@{k}"]
    return pd.DataFrame(columns)


def evaluate(
    X: object,
    Y: object,
    k: int = 10,
    labels: object = None,
    metric: str = "euclidean",
    *,
    backend: str = "local",
    scheduler: str | None = None,
) -> dict[str, float]:
    """Score an embedding at one neighbourhood size, with plain keys.

    Parameters
    ----------
    X : array-like of shape (n, d), or (n, n) with ``metric="precomputed"``
        Data features or distance matrix.
    Y : array-like of shape (n, q)
        Embedding.
    k : int
        Neighbourhood size (``1 <= k < n/2``).
    labels : array-like of shape (n,), optional
        Classes; adds ``knn_accuracy`` and ``silhouette``.
    metric : {"euclidean", "precomputed"}
    backend : {"local", "dask"}
        ``"dask"``: the neighbourhood measures and the R_NX area are computed
        on the workers of the cluster at ``scheduler``, with the same values
        (see :func:`score`).
    scheduler : str, optional
        Address of a running Dask scheduler, with ``backend="dask"``.

    Returns
    -------
    dict of str to float
        ``trustworthiness``, ``continuity``, ``knn_recall``, ``stress``,
        ``sammon_stress``, ``shepard_spearman``, ``mrre_data``,
        ``mrre_embedding``, ``lcmc``, ``rnx_auc`` (K = 1..n-2), ``rnx_auc@k``
        (K = 1..k; it keeps its suffix) and ``knn_accuracy``, ``silhouette``
        with labels.  Global measures are estimated from
        sampled pairs above 5000 points, as in :func:`score`.
    """
    result = score(X, Y, ks=[k], labels=labels, metric=metric, backend=backend, scheduler=scheduler)
    suffix = f"@{k}"
    plain = {key: key.removesuffix(suffix) for key in result.values}
    return {key if plain[key] in result.values else plain[key]: float(v) for key, v in result.values.items()}


def coranking_curve(X: object, Y: object, k_max: int, metric: str = "euclidean") -> pd.DataFrame:
    """Q_NX(K) and R_NX(K) for K = 1..k_max (Lee & Verleysen 2009).

    Parameters
    ----------
    X : array-like of shape (n, d), or (n, n) with ``metric="precomputed"``
    Y : array-like of shape (n, q)
    k_max : int
        ``1 <= k_max <= n - 2``.
    metric : {"euclidean", "precomputed"}

    Returns
    -------
    pandas.DataFrame
        Columns ``K``, ``Q_NX``, ``R_NX``.
    """
    x_points, x_matrix, y = _inputs(X, Y, metric)
    n = y.shape[0]
    if n < 4:
        raise InputError("X", f"at least 4 points, got {n}")
    k_curve = _curve_k(k_max, [1], n)
    local = _local(*_rows(x_points, x_matrix, y), [], k_curve, np.arange(n), default_memory_bytes())
    big_k, q, r = curve_table(local.overlap_sum, local.n_queries, n)
    return pd.DataFrame({"K": big_k, "Q_NX": q, "R_NX": r})
