"""The validated suite as plain values: what to embed, with what, how often and how to score it."""

from __future__ import annotations

import hashlib
import itertools
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from ..config import RunSettings, Scoring
from .expect import Expectation
from .tolerances import Tolerance


@dataclass(frozen=True)
class DatasetEntry:
    """A dataset named in a suite: registry name, label and validated parameters.

    ``holdout`` is the share of points held out of every fit (a fraction in
    (0, 1) or a count), ``None`` when every point is fitted.
    """

    name: str
    use: str
    params: Mapping[str, Any]
    holdout: float | int | None = None


@dataclass(frozen=True)
class MethodEntry:
    """A method named in a suite: fixed parameters plus a grid to expand.

    ``family`` is the method's family (``neighbour`` for t-SNE and kin), read
    from the registry when the suite is parsed, so later readers need not
    import a plug-in to know it.  ``out_of_sample`` is ``""`` (held-out points
    are placed by the method's own ``transform``) or ``"knn_interpolation"``.
    """

    name: str
    use: str
    params: Mapping[str, Any]
    grid: Mapping[str, tuple[Any, ...]]
    family: str = "other"
    out_of_sample: str = ""

    @property
    def is_plugin(self) -> bool:
        """Named as ``package.module:Name`` rather than by registry name."""
        return ":" in self.use

    @property
    def gridded(self) -> bool:
        """Run over more than one grid point (its best point is then "tuned")."""
        return len(self.grid_points()) > 1

    def grid_points(self) -> list[dict[str, Any]]:
        """Every combination of the grid, each merged over the fixed parameters."""
        keys = list(self.grid)
        points = []
        for values in itertools.product(*(self.grid[k] for k in keys)):
            point = dict(self.params)
            point.update(zip(keys, values))
            points.append(point)
        return points


@dataclass(frozen=True)
class Suite:
    """A validated suite: what to embed, with what, how often and how to score it.

    Attributes
    ----------
    plugin_roots : tuple of str
        Folders plug-in modules may be imported from besides the installed
        packages: the working folder and the suite's folder at parse time.
    """

    name: str
    description: str
    seeds: tuple[int, ...]
    dimensions: int
    datasets: tuple[DatasetEntry, ...]
    methods: tuple[MethodEntry, ...]
    scoring: Scoring
    run: RunSettings
    expect: tuple[Expectation, ...] = ()
    tolerances: Mapping[str, Tolerance | float] = field(default_factory=dict)
    path: str = "<suite>"
    text: str = ""
    plugin_roots: tuple[str, ...] = ()

    @property
    def digest(self) -> str:
        """SHA-256 of the suite text, 16 hex characters."""
        return hashlib.sha256(self.text.encode()).hexdigest()[:16]

    @property
    def gridded_methods(self) -> set[str]:
        """Names of the methods run over more than one grid point."""
        return {m.name for m in self.methods if m.gridded}

    @property
    def neighbour_methods(self) -> list[str]:
        """Names of the neighbour-family methods (t-SNE and kin), sorted."""
        return sorted({m.name for m in self.methods if m.family == "neighbour"})
