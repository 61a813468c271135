"""The built-in methods: scikit-learn estimators plus our classical scaling and Sammon mapping.

Each builder turns a suite's parameters into a configured estimator.  Defaults
follow scikit-learn unless a benchmark needs a different one; those places say
why.  Randomized estimators get the cell's seed as ``random_state``; ``n_jobs``
is left at its default (one process) because the runner parallelises cells.
"""

from __future__ import annotations

from typing import Any

from sklearn.decomposition import PCA, KernelPCA
from sklearn.manifold import MDS, Isomap, LocallyLinearEmbedding, SpectralEmbedding
from sklearn.random_projection import GaussianRandomProjection

from ..errors import InputError
from ..params import Param, at_least, between
from ._classical import ClassicalScaling
from ._isomap import FixedStartIsomap
from ._registry import register_method
from ._tsne import ExactStartTSNE
from .parametric import ParametricMDS, ParametricSammon, ParametricTSNE
from .sammon import SammonMapping


def _positive(v: Any) -> str | None:
    return None if v > 0 else "a value > 0"


def _auto_or_positive(v: Any) -> str | None:
    if isinstance(v, str):
        return None if v == "auto" else "'auto' or a number > 0"
    return _positive(v)


def _neighbours(default: int = 10) -> Param:
    # scikit-learn uses 5 (Isomap, LLE) or n/10 (SpectralEmbedding); 10 keeps
    # neighbour graphs connected on noisy data and stays cheap on large n.
    return Param("n_neighbors", int, default, "neighbours per point in the graph", at_least(1))


@register_method(
    "pca",
    params=(Param("whiten", bool, False, "scale components to unit variance"),),
    places_new_points=True,
    description="principal component analysis (full SVD)",
    family="linear",
    randomized=False,
    source="Pearson 1901; Hotelling 1933 (scikit-learn PCA)",
)
def build_pca(n_components: int, seed: int, precomputed: bool, *, whiten: bool) -> PCA:
    """PCA with the full SVD, so the result does not depend on the seed."""
    return PCA(n_components=n_components, whiten=whiten, svd_solver="full")


@register_method(
    "random_projection",
    places_new_points=True,
    description="Gaussian random projection",
    family="linear",
    source="Johnson and Lindenstrauss 1984 (scikit-learn GaussianRandomProjection)",
)
def build_random_projection(n_components: int, seed: int, precomputed: bool) -> GaussianRandomProjection:
    """Projection on a Gaussian random matrix."""
    return GaussianRandomProjection(n_components=n_components, random_state=seed)


@register_method(
    "kernel_pca",
    params=(
        # scikit-learn defaults to the linear kernel, which is plain PCA.
        Param(
            "kernel", str, "rbf", "kernel function", choices=("rbf", "poly", "sigmoid", "cosine", "linear")
        ),
        Param("gamma", float, None, "kernel width for rbf/poly/sigmoid (default 1/n_features)", _positive),
        Param("degree", int, 3, "degree of the poly kernel", at_least(1)),
    ),
    places_new_points=True,
    description="kernel principal component analysis",
    family="spectral",
    quadratic_memory=True,
    source="Schoelkopf, Smola and Mueller 1998 (scikit-learn KernelPCA)",
)
def build_kernel_pca(
    n_components: int, seed: int, precomputed: bool, *, kernel: str, gamma: float | None, degree: int
) -> KernelPCA:
    """Kernel PCA; the eigensolver may be iterative, hence the seed."""
    return KernelPCA(n_components=n_components, kernel=kernel, gamma=gamma, degree=degree, random_state=seed)


@register_method(
    "classical_mds",
    description="classical (Torgerson) scaling; equals PCA on coordinates",
    family="distance",
    accepts_distances=True,
    randomized=False,
    quadratic_memory=True,
    source="Torgerson 1952",
)
def build_classical_mds(n_components: int, seed: int, precomputed: bool) -> ClassicalScaling:
    """Classical scaling from distances, PCA scores from coordinates."""
    return ClassicalScaling(n_components=n_components, metric="precomputed" if precomputed else "euclidean")


@register_method(
    "mds",
    params=(
        # scikit-learn 1.10 switches to a classical-scaling start; it is also
        # deterministic and needs a single run.
        Param("init", str, "classical_mds", "start configuration", choices=("classical_mds", "random")),
        Param("n_init", int, 1, "number of random starts (ignored with init=classical_mds)", at_least(1)),
        # scikit-learn: 300; 100 keeps digits (1797 points) to about three seconds.
        Param("max_iter", int, 100, "SMACOF iterations per start", at_least(1)),
        Param("eps", float, 1e-6, "relative stress change at which SMACOF stops", _positive),
    ),
    description="metric multidimensional scaling (SMACOF)",
    family="distance",
    accepts_distances=True,
    quadratic_memory=True,
    source="Kruskal 1964; de Leeuw 1977 (scikit-learn MDS)",
    # A classical-scaling start leaves scikit-learn's SMACOF nothing random: two seeds gave
    # byte-identical embeddings on every quickstart dataset.
    seed_free=lambda params, precomputed: params.get("init", "classical_mds") == "classical_mds",
)
def build_mds(
    n_components: int, seed: int, precomputed: bool, *, init: str, n_init: int, max_iter: int, eps: float
) -> MDS:
    """Metric MDS by SMACOF, from coordinates or a distance matrix."""
    return MDS(
        n_components=n_components,
        metric_mds=True,
        init=init,
        n_init=n_init,
        max_iter=max_iter,
        eps=eps,
        random_state=seed,
        metric="precomputed" if precomputed else "euclidean",
        normalized_stress="auto",
    )


@register_method(
    "sammon",
    params=(
        Param(
            "init",
            str,
            "pca",
            "start configuration (classical scaling from distances)",
            choices=("pca", "random"),
        ),
        # Each iteration costs a few n x n passes (about 0.08 s on digits, 1797
        # points, one thread).  100 bring every registered generated and bundled
        # dataset at its defaults within 0.03% of its converged stress (digits,
        # the slowest, 0.026%; 50 left it 0.09% above); tests/test_sammon_default.py.
        Param("max_iter", int, 100, "pseudo-Newton iterations", at_least(1)),
        Param("tol", float, 1e-9, "relative stress drop at which to stop", at_least(0)),
    ),
    description="Sammon mapping (pseudo-Newton with step halving)",
    family="distance",
    accepts_distances=True,
    quadratic_memory=True,
    source="Sammon 1969 (own implementation)",
    seed_free=lambda params, precomputed: params.get("init", "pca") == "pca",
)
def build_sammon(
    n_components: int, seed: int, precomputed: bool, *, init: str, max_iter: int, tol: float
) -> SammonMapping:
    """Our Sammon mapping; the seed matters for ``init="random"`` only."""
    return SammonMapping(
        n_components=n_components,
        init=init,
        max_iter=max_iter,
        tol=tol,
        random_state=seed,
        metric="precomputed" if precomputed else "euclidean",
    )


@register_method(
    "isomap",
    params=(_neighbours(),),
    places_new_points=True,
    description="Isomap: classical scaling of graph geodesic distances",
    family="distance",
    accepts_distances=True,
    randomized=False,
    quadratic_memory=True,
    # The eigensolver's start is fixed (harness/methods/_isomap.py), so the seed is unused.
    seed_free=lambda params, precomputed: True,
    source="Tenenbaum, de Silva and Langford 2000 (scikit-learn Isomap)",
)
def build_isomap(n_components: int, seed: int, precomputed: bool, *, n_neighbors: int) -> Isomap:
    """Isomap on a k-nearest-neighbour graph, its eigensolver started from a fixed vector."""
    return FixedStartIsomap(
        n_components=n_components,
        n_neighbors=n_neighbors,
        metric="precomputed" if precomputed else "minkowski",
    )


@register_method(
    "lle",
    params=(
        _neighbours(),
        Param("method", str, "standard", "LLE variant", choices=("standard", "modified", "hessian", "ltsa")),
        Param("reg", float, 1e-3, "regularisation of the local weight fits", _positive),
    ),
    places_new_points=True,
    description="locally linear embedding",
    family="spectral",
    source="Roweis and Saul 2000; Zhang and Wang 2006; Donoho and Grimes 2003; "
    "Zhang and Zha 2004 (scikit-learn LocallyLinearEmbedding)",
)
def build_lle(
    n_components: int, seed: int, precomputed: bool, *, n_neighbors: int, method: str, reg: float
) -> LocallyLinearEmbedding:
    """LLE and its variants; ARPACK's start vector takes the seed."""
    if method == "hessian" and n_neighbors <= n_components * (n_components + 3) // 2:
        need = n_components * (n_components + 3) // 2 + 1
        raise InputError(
            "lle.n_neighbors",
            f"method 'hessian' with {n_components} components needs n_neighbors >= {need}, got {n_neighbors}",
        )
    return LocallyLinearEmbedding(
        n_components=n_components, n_neighbors=n_neighbors, method=method, reg=reg, random_state=seed
    )


@register_method(
    "laplacian_eigenmaps",
    params=(
        _neighbours(),
        Param("affinity", str, "nearest_neighbors", "graph weights", choices=("nearest_neighbors", "rbf")),
        Param("gamma", float, None, "rbf width (default 1/n_features)", _positive),
    ),
    description="Laplacian eigenmaps (spectral embedding of a neighbour graph)",
    family="spectral",
    accepts_distances=True,
    source="Belkin and Niyogi 2003 (scikit-learn SpectralEmbedding)",
)
def build_laplacian_eigenmaps(
    n_components: int, seed: int, precomputed: bool, *, n_neighbors: int, affinity: str, gamma: float | None
) -> SpectralEmbedding:
    """Spectral embedding; from a distance matrix the k-nearest-neighbour graph is used."""
    if precomputed:
        if affinity != "nearest_neighbors":
            raise InputError(
                "laplacian_eigenmaps.affinity",
                "'nearest_neighbors' on a distance matrix ('rbf' needs coordinates)",
            )
        affinity = "precomputed_nearest_neighbors"
    return SpectralEmbedding(
        n_components=n_components, affinity=affinity, gamma=gamma, n_neighbors=n_neighbors, random_state=seed
    )


@register_method(
    "tsne",
    params=(
        Param("perplexity", float, 30.0, "effective number of neighbours (must be < n/3)", _positive),
        Param("early_exaggeration", float, 12.0, "attraction boost in the first 250 iterations", at_least(1)),
        Param(
            "learning_rate",
            (str, float),
            "auto",
            "'auto' (n/early_exaggeration/4) or a number > 0",
            _auto_or_positive,
        ),
        Param("max_iter", int, 1000, "gradient-descent iterations", at_least(250)),
        Param(
            "init",
            str,
            "pca",
            "start configuration; forced to 'random' on a distance matrix",
            choices=("pca", "random"),
        ),
        Param("angle", float, 0.5, "Barnes-Hut accuracy/speed trade-off", between(0.0, 1.0)),
    ),
    description="t-distributed stochastic neighbour embedding (Barnes-Hut)",
    family="neighbour",
    accepts_distances=True,
    source="van der Maaten and Hinton 2008; van der Maaten 2014 (scikit-learn TSNE)",
    # The PCA start is exact (harness/methods/_tsne.py) and Barnes-Hut draws nothing, so the seed
    # only matters for a random start (always so on a distance matrix).
    seed_free=lambda params, precomputed: params.get("init", "pca") == "pca" and not precomputed,
)
def build_tsne(
    n_components: int,
    seed: int,
    precomputed: bool,
    *,
    perplexity: float,
    early_exaggeration: float,
    learning_rate: str | float,
    max_iter: int,
    init: str,
    angle: float,
) -> ExactStartTSNE:
    """t-SNE; PCA start is impossible from distances, and Barnes-Hut works up to 3 dimensions."""
    return ExactStartTSNE(
        n_components=n_components,
        perplexity=perplexity,
        early_exaggeration=early_exaggeration,
        learning_rate=learning_rate,
        max_iter=max_iter,
        init="random" if precomputed else init,
        angle=angle,
        method="barnes_hut" if n_components <= 3 else "exact",
        metric="precomputed" if precomputed else "euclidean",
        random_state=seed,
    )


# ---------------------------------------------------------------- parametric mappings (numpy networks)


def _hidden_widths(v: Any) -> str | None:
    try:
        widths = parse_hidden(v)
    except ValueError:
        return "comma-separated positive widths such as '128,128', or 'none'"
    return None if len(widths) <= 8 else "at most 8 hidden layers"


def parse_hidden(text: str) -> tuple[int, ...]:
    """``"128,64"`` -> ``(128, 64)``; ``"none"`` or ``""`` -> ``()`` (an affine map)."""
    text = text.strip().lower()
    if text in ("", "none"):
        return ()
    widths = tuple(int(part) for part in text.split(","))
    if any(w < 1 for w in widths):
        raise ValueError(text)
    return widths


def _network_params(estimator: type) -> tuple[Param, ...]:
    """Network parameters with the estimator's own defaults (one source of truth)."""
    d = estimator().get_params()
    return (
        Param(
            "hidden",
            str,
            ",".join(map(str, d["hidden"])) or "none",
            "hidden-layer widths, comma-separated; 'none' for an affine map",
            _hidden_widths,
        ),
        Param(
            "activation",
            str,
            d["activation"],
            "hidden-layer activation",
            choices=("relu", "tanh", "softplus", "identity"),
        ),
        Param("epochs", int, d["epochs"], "passes over the training rows at most", at_least(1)),
        Param(
            "batch_size",
            int,
            d["batch_size"],
            "rows per minibatch (the loss covers the pairs inside one)",
            at_least(2),
        ),
        Param("learning_rate", float, d["learning_rate"], "Adam step size", _positive),
        Param("weight_decay", float, d["weight_decay"], "L2 penalty on the weight matrices", at_least(0)),
        Param(
            "validation_fraction",
            float,
            d["validation_fraction"],
            "share of rows held out for early stopping (0: none)",
            between(0.0, 0.9),
        ),
        Param(
            "patience",
            int,
            d["patience"],
            "epochs without validation improvement before stopping",
            at_least(1),
        ),
    )


def _network_kwargs(seed: int, values: dict[str, Any]) -> dict[str, Any]:
    return {**values, "hidden": parse_hidden(values["hidden"]), "random_state": seed}


@register_method(
    "parametric_sammon",
    params=_network_params(ParametricSammon),
    description="network trained on Sammon's stress over minibatch pairs (maps new points)",
    places_new_points=True,
    family="distance",
    source="Sammon 1969; minibatch Adam (Kingma and Ba 2015) (own numpy implementation)",
)
def build_parametric_sammon(
    n_components: int, seed: int, precomputed: bool, **values: Any
) -> ParametricSammon:
    """Parametric Sammon mapping; needs coordinates (the network reads features)."""
    return ParametricSammon(n_components=n_components, **_network_kwargs(seed, values))


@register_method(
    "parametric_mds",
    params=(
        Param(
            "stress",
            str,
            "raw",
            "raw stress (scaled by the data's) or Kruskal's stress-1",
            choices=("raw", "kruskal"),
        ),
        *_network_params(ParametricMDS),
    ),
    description="network trained on metric stress over minibatch pairs (maps new points)",
    places_new_points=True,
    family="distance",
    source="Kruskal 1964; minibatch Adam (Kingma and Ba 2015) (own numpy implementation)",
)
def build_parametric_mds(n_components: int, seed: int, precomputed: bool, **values: Any) -> ParametricMDS:
    """Parametric metric MDS; needs coordinates."""
    return ParametricMDS(n_components=n_components, **_network_kwargs(seed, values))


@register_method(
    "parametric_tsne",
    params=(
        Param("perplexity", float, 30.0, "effective number of neighbours within a minibatch", _positive),
        Param(
            "alpha",
            (str, float),
            "auto",
            "Student-t degrees of freedom; 'auto' = max(1, dimensions - 1)",
            _auto_or_positive,
        ),
        *_network_params(ParametricTSNE),
    ),
    description="network trained on the t-SNE objective within minibatches (maps new points)",
    places_new_points=True,
    family="neighbour",
    source="van der Maaten 2009; van der Maaten and Hinton 2008 (own numpy implementation)",
)
def build_parametric_tsne(n_components: int, seed: int, precomputed: bool, **values: Any) -> ParametricTSNE:
    """Parametric t-SNE; needs coordinates."""
    return ParametricTSNE(n_components=n_components, **_network_kwargs(seed, values))
