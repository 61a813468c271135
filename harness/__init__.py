"""foldbench: benchmark the quality of low-dimensional embeddings.

Public API
----------
load_suite(path) -> Suite
    Read and validate a suite file.
run_suite(suite, out="results", ...) -> RunOutcome
    Fit, score and rank every cell of a suite into a run folder.
evaluate(X, Y, k=10, labels=None, metric="euclidean") -> dict
    Score one embedding.
coranking_curve(X, Y, k_max) -> DataFrame
    Q_NX(K) and R_NX(K) for K = 1..k_max.
load_run(run_dir) -> Run
    Read a finished run folder.
check_runs(current, baseline, ...) -> CheckOutcome
    Compare a run with a baseline: ``.table`` and ``.passed``.
"""
from __future__ import annotations

__version__ = "0.1.0"

from .check import CheckOutcome, check_runs
from .errors import InputError
from .metrics import coranking_curve, evaluate
from .pipeline import RunOutcome, run_suite
from .results import Run, load_run
from .suite import Suite, load_suite

__all__ = ["CheckOutcome", "check_runs", "InputError", "Run", "RunOutcome", "Suite", "coranking_curve", "evaluate", "load_run",
           "load_suite", "run_suite", "__version__"]
