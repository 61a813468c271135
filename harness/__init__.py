"""foldbench: benchmark the quality of low-dimensional embeddings.

Public API
----------
load_suite(path) -> Suite
    Read and validate a suite file.
run_suite(suite, out="results", ...) -> RunSummary
    Fit, score and rank every cell of a suite into a run folder.
load_run(run_dir) -> RunFolder
    Open a finished run folder (``.scores``, ``.suite``, ``.manifest``, ``.embedding(key)``).
check_runs(current, baseline, ...) -> CheckOutcome
    Compare a run with a baseline: ``.table`` and ``.passed``.
rerun(run_dir) -> RerunOutcome
    Run a finished run again and compare cell by cell.
evaluate(X, Y, k=10, labels=None, metric="euclidean", backend="local", scheduler=None) -> dict
    Score one embedding (``backend="dask"``: its neighbourhood measures on a Dask cluster).
coranking_curve(X, Y, k_max) -> DataFrame
    Q_NX(K) and R_NX(K) for K = 1..k_max.
check_method(obj) -> list of str
    What stops a class from working as a foldbench plug-in (empty: nothing).
choose(data, budget="10m", care="balanced", ...) -> Recommendation
    Pick a method configuration within a time budget by successive halving.

Layers, each importing only those below it: ``cli`` > ``choose`` > ``api`` > ``report`` >
``compare`` > ``run`` > ``suite`` > ``methods`` > ``datasets`` > ``metrics`` >
``config``, ``errors``, ``text``, ``params``.
"""

from __future__ import annotations

from .api import load_run, rerun, run_suite
from .choose import Recommendation, choose
from .compare import CheckOutcome, RunSummary, check_runs
from .config import foldbench_version
from .errors import InputError
from .methods import check_method
from .metrics import coranking_curve, evaluate
from .run import RunFolder
from .suite import Suite, load_suite

__version__ = foldbench_version()

__all__ = [
    "CheckOutcome",
    "InputError",
    "Recommendation",
    "RunFolder",
    "RunSummary",
    "Suite",
    "__version__",
    "check_method",
    "check_runs",
    "choose",
    "coranking_curve",
    "evaluate",
    "load_run",
    "load_suite",
    "rerun",
    "run_suite",
]
