"""Settings values shared by every layer: how cells are scored and run, and what a cell's status is.

These are plain frozen values; the suite loader builds them from YAML, the
command line overrides them, and the runner and scorer read them.  This
module imports nothing from the package, so any layer may use it.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from enum import StrEnum
from importlib.metadata import PackageNotFoundError, version


def foldbench_version() -> str:
    """The installed distribution's version (``pyproject.toml`` is the one place it is written)."""
    try:
        return version("foldbench")
    except PackageNotFoundError:  # a source tree that was never installed
        return "0+unknown"


#: Names of the execution backends (the registry in :mod:`harness.run.backends` fills them in).
BACKEND_NAMES = ("local", "dask")


class CellStatus(StrEnum):
    """How a cell ended.  The value is what run folders store (``"ok"``, ...)."""

    OK = "ok"
    FAILED = "failed"
    TIMEOUT = "timeout"
    CRASHED = "crashed"
    SKIPPED = "skipped"
    #: Stopped by the user; never stored, so such a cell is computed again on resume.
    INTERRUPTED = "interrupted"


#: Statuses a run folder may hold.
STORED_STATUSES = frozenset(s for s in CellStatus if s is not CellStatus.INTERRUPTED)


def is_failure(status: str) -> bool:
    """Whether a status (enum or stored text) means the cell was meant to run and did not finish ok."""
    return status not in (CellStatus.OK, CellStatus.SKIPPED)


@dataclass(frozen=True)
class Scoring:
    """How cells are scored.

    Attributes
    ----------
    ks : tuple of int
        Neighbourhood sizes for the local measures.
    rank_by : mapping
        Measure name (``trustworthiness`` or ``trustworthiness@30``) to weight.
    pair_sample_above : int
        Above this many points the pairwise-distance measures use sampled pairs.
    pairs : int
        Number of sampled pairs.
    estimate_above : int or None
        Above this many points the local measures are estimated from query points.
    queries : int
        Number of query points for estimates.
    memory_bytes : int or None
        Memory budget for the neighbourhood engine (``None``: a safe share of RAM).
    seed : int
        Seed of every sample drawn while scoring (the same for all methods, so
        differences between methods are not sampling noise).
    """

    ks: tuple[int, ...] = (10,)
    rank_by: Mapping[str, float] = field(
        default_factory=lambda: {"trustworthiness": 1.0, "continuity": 1.0, "shepard_spearman": 1.0}
    )
    pair_sample_above: int = 5000
    pairs: int = 200_000
    estimate_above: int | None = None
    queries: int = 2000
    memory_bytes: int | None = None
    seed: int = 0


@dataclass(frozen=True)
class RunSettings:
    """How cells are executed (all can be overridden on the command line)."""

    jobs: int | None = None
    time_limit: float | None = None
    quadratic_limit: int = 20_000
    backend: str = "local"
    scheduler: str | None = None
