"""Commands on finished run folders: ``report``, ``check``, ``rerun``."""

from __future__ import annotations

import argparse

from ..errors import InputError
from ._base import EXIT_FAILED, EXIT_OK, Command, positive_int, writable_folder


def _level(value: float | None, flag: str) -> None:
    if value is not None and not 0 < value < 1:
        raise InputError(flag, f"expected a level between 0 and 1, got {value}")


def _report_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", metavar="RUN_DIR")
    p.add_argument(
        "--quality",
        default="mean_rank",
        help="quality axis of the Pareto figure: mean_rank or a measure such as trustworthiness@10",
    )
    p.add_argument("--alpha", type=float, default=0.05, help="significance level of the rank tests")


def _report(args: argparse.Namespace) -> int:
    from ..report import write_report
    from ..run import RunFolder
    from ..run.lock import folder_lock

    _level(args.alpha, "--alpha")
    RunFolder.open(args.run_dir)  # a one-line error for a folder that is not a run, before locking it
    writable_folder(args.run_dir, "RUN_DIR", create=False)
    with folder_lock(args.run_dir):  # no report of a folder that a run is still writing
        page = write_report(args.run_dir, quality=args.quality, alpha=args.alpha)
    print(f"Report: {page}")
    return EXIT_OK


def _check_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", metavar="RUN_DIR")
    p.add_argument("--baseline", required=True, metavar="DIR", help="the run folder to compare against")
    p.add_argument(
        "--tolerance",
        action="append",
        metavar="MEASURE=VALUE",
        help="override a tolerance, e.g. stress=0.02 or fit_seconds=0.1+50%% (repeatable)",
    )
    p.add_argument("--alpha", type=float, help="significance level of the Welch test (default 0.05)")
    p.add_argument("--junit", metavar="FILE", help="also write JUnit XML, one test case per comparison")
    p.add_argument("--all", action="store_true", help="also list unchanged comparisons")
    p.add_argument(
        "--allow-missing",
        action="store_true",
        help="pass even when a configuration is in only one of the two runs (by default that fails)",
    )


def _check(args: argparse.Namespace) -> int:
    from ..compare.check import check_runs, check_text, junit_target, write_check
    from ..suite.tolerances import parse_tolerance_flags

    _level(args.alpha, "--alpha")
    if args.junit is not None:
        junit_target(args.junit)
    outcome = check_runs(
        args.run_dir,
        args.baseline,
        tolerances=parse_tolerance_flags(args.tolerance or []),
        alpha=args.alpha,
        allow_missing=args.allow_missing,
    )
    print(check_text(outcome, show_unchanged=args.all))
    write_check(outcome, args.junit)
    return EXIT_OK if outcome.passed else EXIT_FAILED


def _rerun_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", metavar="RUN_DIR")
    p.add_argument("--out", metavar="DIR", help="root for the new run (default: the original run's root)")
    p.add_argument("--jobs", type=int, metavar="N", help="cells computed at once")


def _rerun(args: argparse.Namespace) -> int:
    from ..api import rerun
    from ..compare.rerun import rerun_text

    positive_int(args.jobs, "--jobs")
    if args.out:
        writable_folder(args.out, "--out")
    outcome = rerun(args.run_dir, args.out, jobs=args.jobs)
    print(rerun_text(outcome))
    return EXIT_OK if outcome.reproduced else EXIT_FAILED


COMMANDS = [
    Command(
        "report",
        "write the report (HTML page, figures, LaTeX and Markdown tables) of a run",
        _report_arguments,
        _report,
    ),
    Command("check", "compare a run with a baseline run: exit 1 on a regression", _check_arguments, _check),
    Command(
        "rerun", "run a finished run again from its folder and compare cell by cell", _rerun_arguments, _rerun
    ),
]
