"""``foldbench run``: a suite (or one table with a default method set) into a ranked run folder."""

from __future__ import annotations

import argparse
import re
import signal
import sys
from collections import Counter
from contextlib import ExitStack
from pathlib import Path
from typing import Any

from ..config import BACKEND_NAMES, is_failure
from ..errors import InputError
from ._base import EXIT_FAILED, EXIT_INTERRUPTED, EXIT_OK, Command, positive_int, writable_folders

#: Exit code after SIGTERM (128 + its number), as a shell reports a process ended by it.
EXIT_TERMINATED = 128 + signal.SIGTERM


class _Terminated(Exception):
    """SIGTERM arrived outside the cell loop (which handles it itself)."""


def _raise_terminated(signum: int, frame: object) -> None:
    raise _Terminated()


def _arguments(run: argparse.ArgumentParser) -> None:
    run.add_argument("suite", nargs="?", help="suite file (YAML)")
    run.add_argument(
        "--table",
        metavar="FILE",
        help="no suite: embed this table (CSV, TSV, Parquet, NPY) with a default method set",
    )
    run.add_argument("--label", metavar="COLUMN", help="with --table: the column holding class labels")
    run.add_argument("--out", metavar="DIR", default="results", help="root folder of runs (default: results)")
    run.add_argument("--jobs", type=int, metavar="N", help="cells computed at once (default: all cores)")
    run.add_argument("--time-limit", type=float, metavar="SECONDS", help="stop a cell that takes longer")
    run.add_argument(
        "--quadratic-limit",
        type=int,
        metavar="N",
        help="largest n for methods whose memory grows as n squared (default 20000)",
    )
    run.add_argument(
        "--backend",
        choices=list(BACKEND_NAMES),
        help="where cells run: child processes here (local, default) or a Dask cluster",
    )
    run.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="with --backend dask: the scheduler to use (default: start a local cluster)",
    )
    run.add_argument("--resume", metavar="RUN_DIR", help="continue an interrupted run of the same suite")
    run.add_argument("--cache", metavar="DIR", help="embedding cache folder (default: the user cache folder)")
    run.add_argument("--no-cache", action="store_true", help="neither read nor fill the embedding cache")
    run.add_argument("--no-report", action="store_true", help="skip the HTML report and figures at the end")
    run.add_argument("--quiet", action="store_true", help="no progress bar and no tables, only the last line")


def _checked(args: argparse.Namespace) -> None:
    if bool(args.suite) == bool(args.table):
        raise InputError("foldbench run", "expected either a suite file or --table FILE (not both)")
    if args.label and not args.table:
        raise InputError("--label", "expected only together with --table")
    positive_int(args.jobs, "--jobs")
    if args.time_limit is not None and not 0 < args.time_limit < float("inf"):
        raise InputError("--time-limit", f"expected seconds > 0, got {args.time_limit}")
    if args.quadratic_limit is not None and args.quadratic_limit < 10:
        raise InputError("--quadratic-limit", f"expected an integer >= 10, got {args.quadratic_limit}")
    if args.no_cache and args.cache:
        raise InputError("--no-cache", "expected either --cache DIR or --no-cache, not both")
    folders = [(args.resume, "--resume", False) if args.resume else (args.out, "--out", True)]
    writable_folders(*folders, *([(args.cache, "--cache", True)] if args.cache else []))


def _suite(args: argparse.Namespace) -> Any:
    """The suite to run: the file given, or the default suite written for ``--table``."""
    if not args.table:
        return args.suite
    from ..datasets import get_dataset_spec, load_dataset
    from ..params import validate_params
    from ..suite import parse_suite
    from ..suite.starter import table_suite_text

    table = Path(args.table)
    name = re.sub(r"[^A-Za-z0-9_.-]", "_", table.stem).strip("._-") or "table"
    given = {"path": str(table.resolve())} | ({"label": args.label} if args.label else {})
    n = load_dataset("table", validate_params(given, get_dataset_spec("table").params, "--table")).n
    return parse_suite(table_suite_text(name, table.resolve(), args.label, n), f"{table}")


def _handler(args: argparse.Namespace) -> int:
    _checked(args)
    previous = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        # The folder's lock is held until the report is written (the stack closes last).
        with ExitStack() as hold:
            return _run(args, hold)
    except _Terminated:
        print("foldbench: terminated", file=sys.stderr)
        return EXIT_TERMINATED
    finally:
        signal.signal(signal.SIGTERM, previous)


def _run(args: argparse.Namespace, hold: ExitStack) -> int:
    from ..api import run_suite
    from ..run import RunInterrupted, default_cache_dir

    suite = _suite(args)
    cache = None if args.no_cache else Path(args.cache) if args.cache else default_cache_dir()
    bar = None if args.quiet else ProgressBar()
    try:
        outcome = run_suite(
            suite,
            args.out,
            jobs=args.jobs,
            time_limit=args.time_limit,
            quadratic_limit=args.quadratic_limit,
            resume=args.resume,
            cache=cache,
            backend=args.backend,
            scheduler=args.scheduler,
            progress=bar.update if bar else None,
            hold=hold,
        )
    except RunInterrupted as stopped:
        if bar:
            bar.close()
        source = args.suite or f"--table {args.table}"
        print(
            f"Interrupted: {stopped.finished} of {stopped.total} cells are stored in {stopped.run_dir}.\n"
            f"Resume with: foldbench run {source} --resume {stopped.run_dir}",
            file=sys.stderr,
        )
        return EXIT_TERMINATED if stopped.signum == signal.SIGTERM else EXIT_INTERRUPTED
    finally:
        if bar:
            bar.close()
    return _finish(outcome, args)


def _finish(outcome: Any, args: argparse.Namespace) -> int:
    """Tables, expectations, the report and the last line of a finished run."""
    from ..compare import evaluate_expectations, expectations_text

    if not args.quiet:
        print_ranking(outcome)
    judged = evaluate_expectations(outcome.suite, outcome.scores)
    if judged:
        print(expectations_text(judged))
    if not args.no_report:
        from ..report import write_report

        page = write_report(outcome.folder)
        if not args.quiet:
            print(f"Report: {page}")
    counts = ", ".join(f"{v} {k}" for k, v in sorted(outcome.counts.items()))
    print(f"{sum(outcome.counts.values())} cells ({counts}) in {outcome.seconds:.1f} s -> {outcome.run_dir}")
    return EXIT_FAILED if outcome.failed or any(not r.passed for r in judged) else EXIT_OK


def print_ranking(outcome: Any) -> None:
    """The ranking across datasets, one table per dataset, and the notes."""
    from ..compare.tables import dataset_table, overall_table

    print("\nAcross datasets (mean of per-dataset mean ranks, 1 = best)\n")
    print(overall_table(outcome.overall, outcome.suite.gridded_methods))
    for name, group in outcome.summary.groupby("dataset", sort=False):
        print(f"\n{name}\n")
        print(dataset_table(group, outcome.rank_by))
    for note in outcome.notes:
        print(f"\nNote: {note}")
    print()


class ProgressBar:
    """Cells done / failed / left with elapsed time, on stderr."""

    def __init__(self) -> None:
        from tqdm import tqdm

        tqdm.monitor_interval = 0
        self._tqdm = tqdm
        self._bar: Any = None
        self._status: Counter[str] = Counter()

    def update(self, result: Any, done: int, total: int) -> None:
        """Count one stored cell (the runner's progress hook)."""
        if self._bar is None:
            self._bar = self._tqdm(
                total=total,
                unit="cell",
                dynamic_ncols=True,
                file=sys.stderr,
                bar_format="{l_bar}{bar}| {n_fmt}/{total_fmt} [{elapsed}<{remaining}] {postfix}",
            )
        self._status[result.status] += 1
        bad = sum(v for k, v in self._status.items() if is_failure(k))
        self._bar.set_postfix_str(f"failed {bad}, left {total - done}", refresh=False)
        self._bar.set_description(f"{result.cell.dataset}/{result.cell.method}", refresh=False)
        self._bar.update(1)

    def close(self) -> None:
        """End the bar's line."""
        if self._bar is not None:
            self._bar.close()


COMMANDS = [
    Command(
        "run",
        "run a suite (or one table with a default method set)",
        _arguments,
        _handler,
        "Run a suite: every method on every dataset for every seed, scored and ranked into a run folder.",
    )
]
