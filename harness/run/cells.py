"""Cells: one (dataset, method, parameters, seed) each, and the plan that lists them."""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..config import CellStatus
from ..datasets import Dataset
from ..errors import InputError
from ..methods import MethodSpec, get_method_spec
from ..suite import Suite
from ..text import params_text

#: Bytes per float64 matrix entry times the dense n x n matrices such a method keeps at once
#: (distances, weights, gradient terms); a rough, deliberately generous estimate.
_QUADRATIC_MATRICES = 4


@dataclass(frozen=True)
class Cell:
    """One unit of work: fit one method on one dataset with one seed.

    A cell is a plain, hashable value; :attr:`key` names its files, so a
    finished cell is recognised and never computed twice.
    """

    dataset: str
    method: str
    use: str
    params: tuple[tuple[str, Any], ...]
    seed: int
    dimensions: int
    data_fingerprint: str
    holdout: float | int | None = None
    out_of_sample: str = ""

    def as_dict(self) -> dict[str, Any]:
        """The fields; the held-out ones only when set, so cells fitted on every point keep their keys."""
        doc = asdict(self)
        if self.holdout is None:
            del doc["holdout"], doc["out_of_sample"]
        return doc

    @property
    def params_text(self) -> str:
        """Compact text of the parameters, ``-`` when there are none."""
        return params_text(self.params)

    @property
    def key(self) -> str:
        """Stable 16-hex name of the cell (hash of everything that defines it)."""
        doc = json.dumps(self.as_dict(), sort_keys=True, default=str)
        return hashlib.sha256(doc.encode()).hexdigest()[:16]

    def params_dict(self) -> dict[str, Any]:
        """Parameters as a dict."""
        return dict(self.params)


@dataclass(frozen=True)
class KnownFit:
    """An embedding computed before (the cache's), with the cost of the fit that made it."""

    embedding: np.ndarray
    fit_seconds: float
    fit_peak_mb: float


@dataclass
class CellResult:
    """What computing a cell produced; plain data handed from a backend to the run folder.

    ``status`` is a :class:`~harness.config.CellStatus`; ``interrupted`` is never
    stored, so such a cell is computed again on resume.  ``copy_of`` is the key
    of the cell whose stored result this one repeats (a seed-free method fitted
    once for all seeds), ``""`` when the cell was computed.
    """

    cell: Cell
    status: CellStatus
    error: str = ""
    detail: str = ""
    embedding: np.ndarray | None = None
    values: dict[str, float] = field(default_factory=dict)
    intervals: dict[str, tuple[float, float]] = field(default_factory=dict)
    estimated: tuple[str, ...] = ()
    curve: pd.DataFrame | None = None
    points: pd.DataFrame | None = None
    fit_seconds: float = float("nan")
    fit_peak_mb: float = float("nan")
    score_seconds: float = float("nan")
    from_cache: bool = False
    copy_of: str = ""
    warnings: tuple[str, ...] = ()
    heldout: dict[str, Any] = field(default_factory=dict)


def _canonical(params: dict[str, Any]) -> tuple[tuple[str, Any], ...]:
    return tuple(sorted(params.items()))


def plan(suite: Suite, datasets: dict[str, Dataset]) -> tuple[list[Cell], list[CellResult]]:
    """Expand a suite into cells.

    Parameters
    ----------
    suite : Suite
        The validated suite.
    datasets : dict
        Loaded datasets by name (from :func:`harness.suite.load_datasets`).

    Returns
    -------
    cells : list of Cell
        Cells to compute, ordered dataset, method, grid point, seed.
    refused : list of CellResult
        Cells that cannot run (a method that needs coordinates on a distance
        matrix, or an n-squared method above the suite's size guard), each with
        status ``skipped`` and the reason.
    """
    cells: list[Cell] = []
    refused: list[CellResult] = []
    unmatched: dict[
        int, str
    ] = {}  # data-bound methods (embedding files) and the last reason they fit nowhere
    for d in suite.datasets:
        ds = datasets[d.name]
        fp = ds.fingerprint()
        for i, m in enumerate(suite.methods):
            spec = get_method_spec(m.use, roots=suite.plugin_roots)
            reason = _refusal(spec, ds, suite.run.quadratic_limit)
            if not reason and spec.check_dataset is not None:
                reason = spec.check_dataset(dict(m.params), ds, suite.dimensions, suite.seeds)
                if reason:
                    unmatched.setdefault(i, reason)
                else:
                    unmatched[i] = ""
            for point in m.grid_points():
                for seed in suite.seeds:
                    oos = m.out_of_sample if d.holdout is not None else ""
                    cell = Cell(
                        d.name, m.name, m.use, _canonical(point), seed, suite.dimensions, fp, d.holdout, oos
                    )
                    if reason:
                        refused.append(CellResult(cell, CellStatus.SKIPPED, reason))
                    else:
                        cells.append(cell)
    for i, reason in unmatched.items():
        if reason:
            # A stored embedding that matches no dataset of the suite is a mistake, not a skip.
            raise InputError(f"{suite.path}: methods[{i}] ({suite.methods[i].name})", reason)
    return cells, refused


def seed_copies(cells: list[Cell], suite: Suite, datasets: Mapping[str, Dataset]) -> dict[str, Cell]:
    """The cells that repeat another cell's fit: key of the copy -> the cell fitted for it.

    A method whose output does not depend on the seed for its parameters
    (:meth:`~harness.methods.MethodSpec.ignores_seed`) is fitted and scored once,
    for its first seed in plan order; the suite scores every cell with the same
    scoring seed, so its other seeds' results are the same bytes.  Cells with a
    held-out split are never copied (the split depends on the seed).
    """
    first: dict[tuple[Any, ...], Cell] = {}
    copies: dict[str, Cell] = {}
    for cell in cells:
        if cell.holdout is not None:
            continue  # every seed draws its own held-out split, so no two seeds fit the same points
        spec = get_method_spec(cell.use, roots=suite.plugin_roots)
        if not spec.ignores_seed(cell.params_dict(), datasets[cell.dataset].is_precomputed):
            continue
        config = (cell.dataset, cell.method, cell.use, cell.params, cell.dimensions, cell.data_fingerprint)
        source = first.setdefault(config, cell)
        if source is not cell:
            copies[cell.key] = source
    return copies


def _refusal(spec: MethodSpec, ds: Dataset, quadratic_limit: int) -> str:
    if ds.is_precomputed and not spec.accepts_distances:
        return f"{spec.name} needs feature coordinates; dataset '{ds.name}' is a distance matrix"
    if spec.quadratic_memory and ds.n > quadratic_limit:
        gib = _QUADRATIC_MATRICES * 8 * ds.n**2 / 2**30
        return (
            f"{spec.name} keeps n x n matrices: n={ds.n} needs about {gib:.1f} GiB; "
            f"raise run.quadratic_limit (now {quadratic_limit}) or --quadratic-limit to allow it"
        )
    return ""
