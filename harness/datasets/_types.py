"""The plain value every dataset loader returns."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True, eq=False)
class Dataset:
    """Data to embed, with whatever ground truth is known.

    Exactly one of ``X`` and ``distances`` is set.

    Parameters
    ----------
    name : str
        Label of the dataset in a suite (``roll``), or the registry name.
    X : ndarray of shape (n, d), float64, optional
        Feature coordinates.
    distances : ndarray of shape (n, n), float64, optional
        Precomputed symmetric distance matrix with a zero diagonal, when only
        distances between items are known.
    labels : ndarray of shape (n,), optional
        Class labels (any hashable values), used by label-aware measures and
        to colour figures.
    latent : ndarray of shape (n, q), optional
        True low-dimensional coordinates (synthetic data), used to measure recovery.
    info : dict
        Free-form facts for reports (source, feature names, notes).
    """

    name: str
    X: np.ndarray | None = None
    distances: np.ndarray | None = None
    labels: np.ndarray | None = None
    latent: np.ndarray | None = None
    info: dict[str, Any] = field(default_factory=dict)

    @property
    def n(self) -> int:
        """Number of items."""
        data = self.X if self.X is not None else self.distances
        if data is None:
            raise ValueError(f"dataset {self.name!r} holds neither features nor distances")
        return int(data.shape[0])

    @property
    def n_features(self) -> int | None:
        """Number of feature columns, ``None`` for a distance matrix."""
        return None if self.X is None else int(self.X.shape[1])

    @property
    def is_precomputed(self) -> bool:
        """True when only a distance matrix is known."""
        return self.X is None

    def fingerprint(self) -> str:
        """SHA-256 of the array bytes (data, labels, latent), hex, 16 characters."""
        h = hashlib.sha256()
        for part in (self.X, self.distances, self.labels, self.latent):
            if part is None:
                h.update(b"-")
                continue
            arr = np.ascontiguousarray(part)
            h.update(str(arr.dtype).encode() + str(arr.shape).encode())
            if arr.dtype == object:
                h.update("\x1f".join(map(str, arr.ravel())).encode())
            else:
                h.update(arr.tobytes())
        row_ids = self.info.get("row_ids")
        if row_ids is not None:
            # Row ids decide how stored embeddings are matched to rows; datasets without ids hash as before.
            h.update(b"ids" + "\x1f".join(map(str, row_ids)).encode())
        return h.hexdigest()[:16]
