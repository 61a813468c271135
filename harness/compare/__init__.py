"""Comparing results: seeds aggregated, configurations ranked and tested, runs checked against each other.

Modules: ``aggregate`` (the one seed aggregation), ``rank`` (within and across
datasets), ``stats`` (intervals, stability, rank tests, fronts), ``summary``
(a run folder ranked, its tables written), ``tables`` (the ranking as
Markdown), ``expectations`` (the suite's bounds judged), ``check`` (the
regression verdict against a baseline), ``environment`` (manifest
differences) and ``rerun`` (two runs compared cell by cell).
"""

from .aggregate import CONFIG, aggregate, measure_columns
from .check import CheckOutcome, check_runs
from .expectations import ExpectationResult, evaluate_expectations, expectations_text
from .rank import Ranking, rank_run, resolve_rank_by
from .rerun import RerunOutcome, compare_cells
from .summary import RunSummary, rank_folder, run_notes, summarise

__all__ = [
    "CONFIG",
    "CheckOutcome",
    "ExpectationResult",
    "Ranking",
    "RerunOutcome",
    "RunSummary",
    "aggregate",
    "check_runs",
    "compare_cells",
    "evaluate_expectations",
    "expectations_text",
    "measure_columns",
    "rank_folder",
    "rank_run",
    "resolve_rank_by",
    "run_notes",
    "summarise",
]
