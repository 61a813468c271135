"""Adapters for widely used methods outside scikit-learn: UMAP, FFT t-SNE, PaCMAP, TriMap, PHATE.

Their packages are the optional extra ``foldbench[methods]`` and are imported
only when a cell fits one of them; without the package the method is listed as
not installed and a suite that names it is refused by ``validate``.  Every
adapter passes the cell's seed to the library and caps the library's own thread
pool at the cell's budget (:mod:`harness.methods._threads`).
"""

from __future__ import annotations

import functools
import logging
from abc import ABC, abstractmethod
from typing import Any

import numpy as np

from ..params import Param, at_least, between
from ._registry import register_method
from ._threads import cell_threads, limit_numba_threads

logger = logging.getLogger(__name__)

#: The install line a missing package's message gives.
INSTALL_HINT = "pip install 'foldbench[methods]'"


def _positive(v: Any) -> str | None:
    return None if v > 0 else "a value > 0"


def _optional_positive(v: Any) -> str | None:
    return None if v is None or v > 0 else "a value > 0 (or leave it unset)"


class _Adapter(ABC):
    """Holds a fitted library object and turns its output into float64 arrays.

    Subclasses set ``self.model`` in :meth:`fit`; :meth:`transform` exists only
    where the library places new points.
    """

    embedding_: np.ndarray

    @abstractmethod
    def fit(self, X: np.ndarray, y: Any = None) -> _Adapter:
        """Fit the library's model and keep its embedding of ``X``."""

    def fit_transform(self, X: np.ndarray, y: Any = None) -> np.ndarray:
        """Fit and return the embedding of the training points."""
        self.fit(X)
        return self.embedding_


class UMAPAdapter(_Adapter):
    """UMAP (McInnes, Healy and Melville 2018) through ``umap-learn``."""

    def __init__(self, n_components: int, seed: int, precomputed: bool, **params: Any) -> None:
        self.n_components, self.seed, self.precomputed, self.params = n_components, seed, precomputed, params

    def fit(self, X: np.ndarray, y: Any = None) -> UMAPAdapter:
        import umap

        limit_numba_threads()
        params = dict(self.params)
        if self.precomputed:
            params["metric"] = "precomputed"
            if params.get("init") == "pca":
                logger.warning("umap: init 'pca' needs coordinates; using 'spectral' on distances")
                params["init"] = "spectral"
        # A fixed random_state makes umap-learn run its optimiser on one thread, as its docs say.
        self.model = umap.UMAP(
            n_components=self.n_components, random_state=self.seed, n_jobs=1, verbose=False, **params
        )
        self.embedding_ = np.asarray(self.model.fit_transform(X), dtype=np.float64)
        return self

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Place new points on the fitted map (umap-learn's ``transform``)."""
        limit_numba_threads()
        return np.asarray(self.model.transform(X), dtype=np.float64)


class FFTTSNEAdapter(_Adapter):
    """t-SNE with FFT-accelerated interpolation (Linderman et al. 2019) through openTSNE."""

    def __init__(self, n_components: int, seed: int, precomputed: bool, **params: Any) -> None:
        self.n_components, self.seed, self.precomputed, self.params = n_components, seed, precomputed, params

    def fit(self, X: np.ndarray, y: Any = None) -> FFTTSNEAdapter:
        import openTSNE

        params = dict(self.params)
        if self.precomputed and params.get("initialization") == "pca":
            logger.warning("fft_tsne: initialization 'pca' needs coordinates; using 'spectral' on distances")
            params["initialization"] = "spectral"
        tsne = openTSNE.TSNE(
            n_components=self.n_components,
            metric="precomputed" if self.precomputed else "euclidean",
            negative_gradient_method="fft",
            n_jobs=cell_threads(),
            random_state=self.seed,
            verbose=False,
            **params,
        )
        self.model = tsne.fit(X)
        self.embedding_ = np.asarray(self.model, dtype=np.float64)
        return self

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Place new points against the fitted map (openTSNE's ``transform``; Poličar et al. 2019)."""
        return np.asarray(self.model.transform(X), dtype=np.float64)


class PaCMAPAdapter(_Adapter):
    """PaCMAP (Wang, Huang, Rudin and Shaposhnik 2021) through ``pacmap``."""

    def __init__(self, n_components: int, seed: int, precomputed: bool, **params: Any) -> None:
        self.n_components, self.seed, self.params = n_components, seed, params

    def fit(self, X: np.ndarray, y: Any = None) -> PaCMAPAdapter:
        import pacmap

        limit_numba_threads()
        params = dict(self.params)
        init = params.pop("init")
        self.model = pacmap.PaCMAP(
            n_components=self.n_components, random_state=self.seed, verbose=False, **params
        )
        self.embedding_ = np.asarray(self.model.fit_transform(X, init=init), dtype=np.float64)
        return self


@functools.cache
def _numba_seeder() -> Any:
    """A compiled function that seeds numba's own random generator (separate from NumPy's)."""
    import numba

    @numba.njit(cache=False)
    def seed(value: int) -> None:  # pragma: no cover - compiled
        np.random.seed(value)  # noqa: NPY002 - trimap draws from the legacy global generator

    return seed


class TriMapAdapter(_Adapter):
    """TriMap (Amid and Warmuth 2019) through ``trimap``.

    The package has no seed argument: it samples triplets with NumPy's and
    numba's global generators, so both are seeded here and numba runs on one
    thread (parallel loops would draw in a thread-dependent order).
    """

    def __init__(self, n_components: int, seed: int, precomputed: bool, **params: Any) -> None:
        self.n_components, self.seed, self.params = n_components, seed, params

    def fit(self, X: np.ndarray, y: Any = None) -> TriMapAdapter:
        import numba
        import trimap

        numba.set_num_threads(1)
        np.random.seed(self.seed)  # noqa: NPY002 - trimap draws from the legacy global generator
        _numba_seeder()(self.seed)
        self.model = trimap.TRIMAP(n_dims=self.n_components, verbose=False, **self.params)
        self.embedding_ = np.asarray(self.model.fit_transform(np.asarray(X, dtype=np.float32)), np.float64)
        return self


class PHATEAdapter(_Adapter):
    """PHATE (Moon et al. 2019) through ``phate``."""

    def __init__(self, n_components: int, seed: int, precomputed: bool, **params: Any) -> None:
        self.n_components, self.seed, self.params = n_components, seed, params

    def fit(self, X: np.ndarray, y: Any = None) -> PHATEAdapter:
        import phate

        self.model = phate.PHATE(
            n_components=self.n_components,
            random_state=self.seed,
            n_jobs=cell_threads(),
            verbose=0,
            **self.params,
        )
        self.embedding_ = np.asarray(self.model.fit_transform(X), dtype=np.float64)
        return self


@register_method(
    "umap",
    params=(
        Param("n_neighbors", int, 15, "neighbours per point in the fuzzy graph", at_least(2)),
        Param("min_dist", float, 0.1, "how tightly points may pack in the embedding", between(0.0, 1.0)),
        Param(
            "metric",
            str,
            "euclidean",
            "distance in the data space (ignored on distance matrices)",
            choices=("euclidean", "manhattan", "cosine", "correlation"),
        ),
        Param("init", str, "spectral", "start layout", choices=("spectral", "pca", "random")),
    ),
    description="uniform manifold approximation and projection (umap-learn)",
    family="neighbour",
    accepts_distances=True,
    places_new_points=True,
    requires=("umap", "umap-learn"),
    source="McInnes, Healy and Melville 2018 (umap-learn)",
)
def build_umap(n_components: int, seed: int, precomputed: bool, **params: Any) -> UMAPAdapter:
    """UMAP; on a distance matrix the metric is ``precomputed``."""
    return UMAPAdapter(n_components, seed, precomputed, **params)


@register_method(
    "fft_tsne",
    params=(
        Param("perplexity", float, 30.0, "effective number of neighbours", _positive),
        Param(
            "exaggeration",
            float,
            None,
            "attraction factor after the early phase (unset: 1, plain t-SNE)",
            _optional_positive,
        ),
        Param("n_iter", int, 500, "optimisation steps after the early phase", at_least(1)),
        Param("initialization", str, "pca", "start layout", choices=("pca", "spectral", "random")),
    ),
    description="t-SNE with FFT-accelerated interpolation (openTSNE)",
    family="neighbour",
    accepts_distances=True,
    places_new_points=True,
    requires=("openTSNE", "openTSNE"),
    source="Linderman et al. 2019; Poličar, Stražar and Zupan 2019 (openTSNE)",
)
def build_fft_tsne(n_components: int, seed: int, precomputed: bool, **params: Any) -> FFTTSNEAdapter:
    """openTSNE with the FFT gradient; on distances the metric is ``precomputed``."""
    return FFTTSNEAdapter(n_components, seed, precomputed, **params)


@register_method(
    "pacmap",
    params=(
        Param("n_neighbors", int, 10, "near pairs per point", at_least(1)),
        Param("MN_ratio", float, 0.5, "mid-near pairs per near pair", _positive),
        Param("FP_ratio", float, 2.0, "further pairs per near pair", _positive),
        Param("init", str, "pca", "start layout", choices=("pca", "random")),
    ),
    description="pairwise controlled manifold approximation (pacmap)",
    family="neighbour",
    requires=("pacmap", "pacmap"),
    source="Wang, Huang, Rudin and Shaposhnik 2021 (pacmap)",
)
def build_pacmap(n_components: int, seed: int, precomputed: bool, **params: Any) -> PaCMAPAdapter:
    """PaCMAP from coordinates."""
    return PaCMAPAdapter(n_components, seed, precomputed, **params)


@register_method(
    "trimap",
    params=(
        Param("n_inliers", int, 12, "near neighbours per point in each triplet", at_least(1)),
        Param("n_outliers", int, 4, "far points per near neighbour", at_least(1)),
        Param("n_random", int, 3, "random triplets per point", at_least(0)),
        Param("n_iters", int, 400, "optimisation steps", at_least(1)),
    ),
    description="large-scale dimensionality reduction using triplets (trimap)",
    family="neighbour",
    requires=("trimap", "trimap"),
    source="Amid and Warmuth 2019 (trimap)",
)
def build_trimap(n_components: int, seed: int, precomputed: bool, **params: Any) -> TriMapAdapter:
    """TriMap from coordinates, seeded through the global generators it uses."""
    return TriMapAdapter(n_components, seed, precomputed, **params)


@register_method(
    "phate",
    params=(
        Param("knn", int, 5, "neighbours for the adaptive kernel", at_least(1)),
        Param("decay", float, 40.0, "kernel decay rate", _positive),
        Param("gamma", float, 1.0, "potential transform (1: log, 0: square root)", between(-1.0, 1.0)),
    ),
    description="potential of heat-diffusion affinity-based transition embedding (phate)",
    family="spectral",
    requires=("phate", "phate"),
    source="Moon et al. 2019 (phate)",
)
def build_phate(n_components: int, seed: int, precomputed: bool, **params: Any) -> PHATEAdapter:
    """PHATE from coordinates."""
    return PHATEAdapter(n_components, seed, precomputed, **params)
