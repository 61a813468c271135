"""The data's side of scoring, made once per dataset and read by the scoring of every embedding of it.

Everything :func:`harness.metrics.score` computes from the data alone (the
pairs of the global measures with their data and latent distances and ranks,
and the whole rank rows behind the exact full-range R_NX area) depends only on
the data and the scoring settings.  A run scores many embeddings of one dataset,
so it makes a :class:`DataSide` once and passes it to each score; the values
are the same as without it, bit for bit, because the same functions compute
the same arrays.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._distances import DistanceRows
from ._global import DataPairs, data_pairs
from ._memory import default_memory_bytes
from ._rnx_area import data_rank_rows, exact_affordable

#: The settings of :func:`harness.metrics.score` a data side depends on.
SETTINGS = ("seed", "pair_sample_above", "n_pairs", "estimate_above", "n_queries", "memory_bytes")


@dataclass(frozen=True)
class DataSide:
    """What scoring needs from the data alone.

    Attributes
    ----------
    n : int
        Number of points.
    settings : dict
        The scoring settings it was made with (see :data:`SETTINGS`); scoring
        with other settings refuses it.
    pairs : DataPairs
        The pairs of the global measures, their data (and latent) distances and ranks.
    area_ranks : ndarray of shape (n, n) or None
        Whole data rank rows for the exact full-range R_NX area; ``None`` when
        the area is estimated from sampled points.
    """

    n: int
    settings: Mapping[str, Any]
    pairs: DataPairs
    area_ranks: np.ndarray | None

    def check(self, n: int, settings: Mapping[str, Any]) -> None:
        """Raise ``ValueError`` unless made for ``n`` points and these settings."""
        if n != self.n:
            raise ValueError(f"the data side was made for {self.n} points, not {n}")
        mine = {k: self.settings.get(k) for k in SETTINGS}
        theirs = {k: settings.get(k) for k in SETTINGS}
        if mine != theirs:
            raise ValueError(f"the data side was made with other scoring settings ({mine} vs {theirs})")


def area_is_exact(n: int, estimate_above: int | None, n_queries: int) -> bool:
    """Whether the full-range area uses every point's whole rank row (and so the data side's)."""
    sampled = estimate_above is not None and n > estimate_above and n_queries < n
    return not sampled and exact_affordable(n)


def make_data_side(
    x_points: np.ndarray | None,
    x_matrix: np.ndarray | None,
    latent: np.ndarray | None,
    settings: Mapping[str, Any],
) -> DataSide:
    """The data side of standardised data (as :func:`harness.metrics.score` holds them)."""
    n = x_points.shape[0] if x_points is not None else x_matrix.shape[0]  # type: ignore[union-attr]
    full: dict[str, Any] = {k: settings.get(k) for k in SETTINGS}
    memory = default_memory_bytes() if full["memory_bytes"] is None else int(full["memory_bytes"])
    _, pair_seed, _ = np.random.SeedSequence(full["seed"]).spawn(3)
    pairs = data_pairs(
        x_points,
        x_matrix,
        latent,
        n,
        pair_sample_above=int(full["pair_sample_above"]),
        n_pairs=int(full["n_pairs"]),
        seed=int(pair_seed.generate_state(1)[0]),
        memory_bytes=memory,
    )
    area = None
    if area_is_exact(n, full["estimate_above"], int(full["n_queries"])):
        rows = DistanceRows(points=x_points) if x_matrix is None else DistanceRows(matrix=x_matrix)
        area = data_rank_rows(rows)
    return DataSide(n, full, pairs, area)
