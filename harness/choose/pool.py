"""The candidate pool: method configurations that ``choose`` considers.

By default every built-in method with a small grid (:data:`DEFAULT_GRIDS`),
the parametric methods at their defaults; from a suite, each grid point of
each of its methods (plug-ins included).  Methods whose memory grows as n
squared are left out above the size guard (``run.quadratic_limit``), and grid
values that the smallest rung cannot take (a perplexity of at least n/3, a
neighbourhood of at least n - 1 points) are left out, each with its reason.
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from ..methods import get_method_spec
from ..suite import Suite

#: The default grids.  ``gamma`` of kernel PCA is a multiple of ``1 / n_features``
#: (the scikit-learn default width), so it is scaled per dataset.
DEFAULT_GRIDS: dict[str, dict[str, tuple[Any, ...]]] = {
    "pca": {},
    "random_projection": {},
    "kernel_pca": {"kernel": ("rbf",), "gamma": (0.3, 1.0, 3.0)},
    "classical_mds": {},
    "mds": {"init": ("classical_mds", "random")},
    "sammon": {},
    "isomap": {"n_neighbors": (5, 10, 20)},
    "lle": {"n_neighbors": (10,)},
    "laplacian_eigenmaps": {"n_neighbors": (10, 20)},
    "tsne": {"perplexity": (5.0, 15.0, 30.0, 50.0)},
    "parametric_sammon": {},
    "parametric_mds": {},
    "parametric_tsne": {},
}


@dataclass(frozen=True)
class Candidate:
    """One method configuration: a registry name (or plug-in) and its parameters.

    Attributes
    ----------
    name : str
        Its label in every table and in ``chosen.yaml`` (a plain name).
    use : str
        Registry name or ``package.module:Name``.
    params : mapping
        Every parameter given to the method.
    """

    name: str
    use: str
    params: Mapping[str, Any] = field(default_factory=dict)

    def describe(self) -> str:
        """``tsne(perplexity=15)``."""
        inner = ", ".join(f"{k}={_value_text(v)}" for k, v in self.params.items())
        return f"{self.use}({inner})" if inner else self.use


@dataclass(frozen=True)
class Pool:
    """The candidates, and those left out with their reasons (``name: reason``)."""

    candidates: tuple[Candidate, ...]
    left_out: tuple[tuple[str, str], ...] = ()


def _value_text(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def candidate_name(use: str, params: Mapping[str, Any], varying: Iterable[str]) -> str:
    """A plain name from the method and the parameters that vary (``tsne-perplexity15``)."""
    base = use.rsplit(":", maxsplit=1)[-1].rsplit(".", maxsplit=1)[-1]
    parts = [base] + [f"{k}{_value_text(params[k])}" for k in varying if k in params]
    name = re.sub(r"[^A-Za-z0-9_.-]", "_", "-".join(parts)).replace("..", "_")
    if len(name) > 64:
        digest = hashlib.sha256(name.encode()).hexdigest()[:8]
        name = f"{name[:55]}-{digest}"
    return name


def default_pool(n_full: int, n_smallest: int, n_features: int, quadratic_limit: int) -> Pool:
    """The default candidates for data of ``n_full`` rows (the smallest dataset has ``n_smallest``).

    Parameters
    ----------
    n_full : int
        Rows of the largest dataset (the size guard looks at it).
    n_smallest : int
        Rows of the smallest dataset at full size (grid values must be valid there;
        a value too large for a smaller rung skips that rung, see :func:`invalid_at`).
    n_features : int
        Feature columns (scales kernel PCA's ``gamma``).
    quadratic_limit : int
        Largest n for methods whose memory grows as n squared.
    """
    found: list[Candidate] = []
    left: list[tuple[str, str]] = []
    for use, grid in DEFAULT_GRIDS.items():
        spec = get_method_spec(use)
        if spec.quadratic_memory and n_full > quadratic_limit:
            left.append((use, f"memory grows as n²; {n_full} rows > quadratic limit {quadratic_limit}"))
            continue
        keys = [k for k, vs in grid.items() if len(vs) > 1]
        for point in _points(grid):
            if use == "kernel_pca":
                point["gamma"] = float(point["gamma"]) / n_features
            name = candidate_name(use, point, keys)
            reason = invalid_at(point, n_smallest)
            if reason:
                left.append((name, reason))
            else:
                found.append(Candidate(name, use, point))
    return Pool(tuple(found), tuple(left))


def _points(grid: Mapping[str, tuple[Any, ...]]) -> list[dict[str, Any]]:
    points: list[dict[str, Any]] = [{}]
    for key, values in grid.items():
        points = [{**p, key: v} for p in points for v in values]
    return points


def invalid_at(params: Mapping[str, Any], n: int) -> str | None:
    """Why a configuration cannot run on ``n`` points (the suite loader's limits), or ``None``."""
    perplexity = params.get("perplexity")
    if perplexity is not None and float(perplexity) >= n / 3:
        need = 3 * float(perplexity)
        return f"perplexity {_value_text(perplexity)} needs more than {need:.0f} points; the data have {n}"
    for key in ("n_neighbors", "knn"):
        value = params.get(key)
        if value is not None and int(value) >= n - 1:
            return f"{key} {value} needs more than {int(value) + 1} points; the data have {n}"
    return None


#: Fewest rows on which a neighbour-graph method (a candidate with ``n_neighbors``) is judged:
#: on sparser subsamples its graph short-circuits the folds of a manifold.  Measured on the
#: rolled sheet (no published source): Isomap with 5 neighbours keeps the latent chart with
#: Spearman 0.94 on 333 rows, 0.64 on 200 and 0.38 on 111 (0.997 on all 1000).
GRAPH_RUNG = 300


def builds_a_graph(params: Mapping[str, Any]) -> bool:
    """A neighbour-graph configuration (it has ``n_neighbors``)."""
    return "n_neighbors" in params


def too_sparse_at(params: Mapping[str, Any], n: int) -> bool:
    """A neighbour-graph configuration on fewer than :data:`GRAPH_RUNG` rows: carried, not judged."""
    return builds_a_graph(params) and n < GRAPH_RUNG


def suite_pool(suite: Suite, n_full: int, n_smallest: int) -> Pool:
    """Each grid point of each method of ``suite`` as a candidate (size guard and size limits applied)."""
    found: list[Candidate] = []
    left: list[tuple[str, str]] = []
    for entry in suite.methods:
        spec = get_method_spec(entry.use, roots=suite.plugin_roots)
        keys = [k for k, vs in entry.grid.items() if len(vs) > 1]
        for point in entry.grid_points():
            name = candidate_name(entry.name, point, keys)
            if spec.quadratic_memory and n_full > suite.run.quadratic_limit:
                left.append(
                    (name, f"memory grows as n²; {n_full} rows > quadratic limit {suite.run.quadratic_limit}")
                )
                continue
            reason = invalid_at(point, n_smallest)
            if reason:
                left.append((name, reason))
            else:
                found.append(Candidate(name, entry.use, dict(point)))
    return Pool(tuple(found), tuple(left))
