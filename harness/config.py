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
from typing import Any


def foldbench_version() -> str:
    """The installed distribution's version (``pyproject.toml`` is the one place it is written)."""
    try:
        return version("foldbench")
    except PackageNotFoundError:  # a source tree that was never installed
        return "0+unknown"


#: Names of the execution backends, known to the layers below the runner (suite validation, the CLI);
#: :func:`harness.run.backends.register_backend` adds the name of every backend it registers.
BACKEND_NAMES: list[str] = ["local", "dask"]
#: Where one embedding's measures may be computed (``measures.backend``, ``score(backend=...)``).
MEASURE_BACKENDS = ("local", "dask")


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
    backend : {"local", "dask"}
        Where a cell's neighbourhood measures are computed: in the cell's own
        process, or spread over the workers of the run's Dask cluster (the
        same values; see ``harness.metrics._cluster``).
    scheduler : str or None
        Address of that cluster's scheduler, filled in where the cell runs
        (never from the suite).
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
    backend: str = "local"
    scheduler: str | None = None

    #: Fields that say where the measures are computed, not what they are (not part of a score's identity).
    PLACEMENT = ("backend", "scheduler")

    def engine_options(self) -> dict[str, Any]:
        """The keyword arguments of :func:`harness.metrics.score` these settings fix (besides ``ks``)."""
        return {
            "seed": self.seed,
            "pair_sample_above": self.pair_sample_above,
            "n_pairs": self.pairs,
            "estimate_above": self.estimate_above,
            "n_queries": self.queries,
            "memory_bytes": self.memory_bytes,
        }


@dataclass(frozen=True)
class RunSettings:
    """How cells are executed (all can be overridden on the command line)."""

    jobs: int | None = None
    time_limit: float | None = None
    quadratic_limit: int = 20_000
    backend: str = "local"
    scheduler: str | None = None


# ---------------------------------------------------------------- input bounds
# Every size in a suite that makes the program allocate is checked against these
# before anything is built (docs/notes/validation.md lists them).

#: Largest suite file read, in bytes (a suite is a page of settings, not data).
MAX_SUITE_BYTES = 2_000_000
#: Most YAML nodes in a suite, counting every node an alias repeats.
MAX_YAML_NODES = 200_000
#: Most seeds per suite.
MAX_SEEDS = 1000
#: Largest seed: the methods hand seeds to NumPy's legacy generator, which takes 0 .. 2**32 - 1.
MAX_SEED = 2**32 - 1
#: Most grid points per method.
MAX_GRID_POINTS = 10_000
#: Most cells per suite (datasets x grid points x seeds).
MAX_CELLS = 100_000
#: Most entries in a suite's ``expect`` list.
MAX_EXPECT = 10_000
#: Share of the usable memory one generated dataset may take while it is built.
DATASET_MEMORY_SHARE = 0.5


def usable_memory_bytes() -> int | None:
    """Memory this process may still use: the smaller of free RAM and the address-space limit left.

    ``None`` when neither is known (not Linux).
    """
    import resource

    known: list[int] = []
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    known.append(int(line.split()[1]) * 1024)
                    break
    except (OSError, ValueError, IndexError):
        pass
    soft, _hard = resource.getrlimit(resource.RLIMIT_AS)
    if soft != resource.RLIM_INFINITY:
        known.append(max(0, soft - _address_space_in_use()))
    return min(known) if known else None


def _address_space_in_use() -> int:
    """Virtual memory this process already maps (what RLIMIT_AS counts), in bytes."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmSize:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return 0
