"""Fit one method on one dataset and check that the result is a usable embedding."""

from __future__ import annotations

import logging
import warnings
from typing import Any

import numpy as np

from ..datasets._types import Dataset
from ..errors import InputError
from ._registry import METHODS, MethodSpec

logger = logging.getLogger(__name__)


class DegenerateEmbedding(RuntimeError):
    """A method returned something that cannot be scored as an embedding.

    Parameters
    ----------
    reason : str
        What is wrong, e.g. ``"3 of 200 values are NaN or infinite"``.
    method, dataset : str
        Names for the message.
    """

    def __init__(self, reason: str, method: str = "", dataset: str = "") -> None:
        self.reason = reason
        self.method = method
        self.dataset = dataset
        where = f"{method} on {dataset}: " if method or dataset else ""
        super().__init__(f"{where}{reason}")


def fit_embedding(
    spec: MethodSpec, dataset: Dataset, n_components: int, params: dict[str, Any], seed: int
) -> np.ndarray:
    """Fit ``spec`` on ``dataset`` and return a checked embedding (see :func:`fit_model`)."""
    return fit_model(spec, dataset, n_components, params, seed)[1]


def fit_model(
    spec: MethodSpec, dataset: Dataset, n_components: int, params: dict[str, Any], seed: int
) -> tuple[Any, np.ndarray]:
    """Fit ``spec`` on ``dataset``; return the fitted estimator and its checked embedding.

    Parameters
    ----------
    spec : MethodSpec
        The method (registry entry or plug-in).
    dataset : Dataset
        Coordinates or a distance matrix.
    n_components : int
        Output dimension.
    params : dict
        Validated method parameters; declared parameters that are missing get
        their defaults.
    seed : int
        The cell's seed, passed to randomized methods as ``random_state``.

    Returns
    -------
    estimator : object
        The fitted estimator (its ``transform``, when it has one, places new points).
    embedding : ndarray of shape (n, n_components), float64

    Raises
    ------
    InputError
        The method needs coordinates but the dataset is a distance matrix.
    DegenerateEmbedding
        The output is not finite, has the wrong shape, or puts all points on one spot.
    """
    precomputed = dataset.is_precomputed
    if precomputed and not spec.accepts_distances:
        takers = ", ".join(sorted(m.name for m in METHODS.values() if m.accepts_distances))
        raise InputError(
            f"method '{spec.name}' on dataset '{dataset.name}'",
            f"the method needs feature coordinates but the dataset is a distance "
            f"matrix; methods that take distances: {takers}",
        )
    values = {p.name: p.default for p in spec.params}
    values.update(params)
    estimator = spec.build(n_components, seed, precomputed, **values)
    if getattr(estimator, "needs_dataset", False):
        # Methods that read a stored embedding match its rows to the dataset's ids.
        estimator.dataset = dataset
    data = dataset.distances if precomputed else dataset.X
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        raw = estimator.fit_transform(data)
    for w in caught:
        logger.warning("%s on %s: %s: %s", spec.name, dataset.name, w.category.__name__, w.message)
    return estimator, check_embedding(raw, dataset.n, n_components, spec.name, dataset.name)


def check_embedding(raw: Any, n: int, n_components: int, method: str = "", dataset: str = "") -> np.ndarray:
    """Convert a method's output to float64 and refuse what cannot be scored.

    Parameters
    ----------
    raw : array-like
        What ``fit_transform`` returned.
    n : int
        Number of items in the dataset.
    n_components : int
        Requested output dimension.
    method, dataset : str
        Names for messages.

    Returns
    -------
    ndarray of shape (n, n_components), float64
    """

    def fail(reason: str) -> DegenerateEmbedding:
        return DegenerateEmbedding(reason, method, dataset)

    if hasattr(raw, "toarray"):
        raw = raw.toarray()
    if np.iscomplexobj(raw):
        raise fail("output holds complex numbers; expected real coordinates")
    try:
        Y = np.asarray(raw, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise fail(f"output is not a numeric array ({type(raw).__name__}: {exc})") from None
    if Y.ndim == 1 and n_components == 1:
        Y = Y.reshape(-1, 1)
    if Y.shape != (n, n_components):
        raise fail(f"output has shape {Y.shape}, expected ({n}, {n_components})")
    bad = int(np.count_nonzero(~np.isfinite(Y)))
    if bad:
        raise fail(f"{bad} of {Y.size} values are NaN or infinite")
    spread = np.ptp(Y, axis=0)
    # Relative to the coordinates' own magnitude, so that no scale is too small
    # or too large: a spread below 1e-12 of it is rounding noise of one point.
    if n > 1 and np.all(spread <= 1e-12 * float(np.abs(Y).max())):
        raise fail("all points coincide (zero spread)")
    flat = np.flatnonzero(spread == 0)
    if n > 1 and flat.size:
        logger.warning("%s on %s: embedding axes %s are constant", method, dataset, ", ".join(map(str, flat)))
    return np.ascontiguousarray(Y)
