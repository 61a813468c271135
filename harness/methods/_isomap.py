"""scikit-learn's Isomap with a fixed start for its eigensolver, so its output depends on the data only.

scikit-learn's Isomap hands the geodesic kernel to ``KernelPCA`` without a
``random_state``; with the ARPACK solver (more than 200 points and fewer than
10 components) the solver's start vector is then drawn from NumPy's global
generator, so two processes (or two fits in one) give embeddings that differ in
the last bits.  Here every fit draws that start from a generator seeded with
:data:`START_SEED`, and NumPy's global state is put back afterwards.  The seed
of a cell is not used, so an Isomap cell is fitted once per dataset and its
other seeds are copies (see :func:`harness.run.cells.seed_copies`).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np
from sklearn.manifold import Isomap

#: Seed of the eigensolver's start vector (any fixed value would do; common practice, no source).
START_SEED = 0


@contextmanager
def fixed_global_start(seed: int = START_SEED) -> Iterator[None]:
    """NumPy's global generator seeded with ``seed`` inside the block, restored after it."""
    state = np.random.get_state()  # noqa: NPY002 - scikit-learn draws the start from the legacy global generator
    np.random.seed(seed)  # noqa: NPY002
    try:
        yield
    finally:
        np.random.set_state(state)  # noqa: NPY002


class FixedStartIsomap(Isomap):
    """:class:`sklearn.manifold.Isomap` whose eigensolver always starts from the same vector."""

    def fit(self, X: Any, y: Any = None) -> FixedStartIsomap:
        """Fit as scikit-learn does, with the fixed start (see the module docstring)."""
        with fixed_global_start():
            super().fit(X, y)
        return self

    def fit_transform(self, X: Any, y: Any = None) -> np.ndarray:
        """Fit and return the embedding, with the fixed start."""
        with fixed_global_start():
            return np.asarray(super().fit_transform(X, y))
