"""The ``foldbench`` command line: parse, call the API, print, exit code.

Exit codes: 0 everything finished, 1 some cells failed (or a check found a
regression), 2 bad input (one line on stderr, no traceback).
"""
from __future__ import annotations

import argparse
import logging
import os
import re
import sys
from collections import Counter
from pathlib import Path

from . import __version__
from .errors import InputError
from .starter import STARTER_SUITE, table_suite_text

EXIT_OK, EXIT_FAILED, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


class _Parser(argparse.ArgumentParser):
    """argparse with usage errors as one line and exit code 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise InputError(self.prog, message)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="foldbench", description="Benchmark low-dimensional embeddings: fit every method "
                "on every dataset across seeds, score, rank.")
    p.add_argument("--version", action="version", version=f"foldbench {__version__}")
    p.add_argument("-v", "--verbose", action="store_true", help="log progress details to stderr")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    run = sub.add_parser("run", help="run a suite (or one table with a default method set)",
                         description="Run a suite: every method on every dataset for every seed, "
                         "scored and ranked into a run folder.")
    run.add_argument("suite", nargs="?", help="suite file (YAML)")
    run.add_argument("--table", metavar="FILE", help="no suite: embed this table (CSV, TSV, Parquet, NPY) "
                     "with a default method set")
    run.add_argument("--label", metavar="COLUMN", help="with --table: the column holding class labels")
    run.add_argument("--out", metavar="DIR", default="results", help="root folder of runs (default: results)")
    run.add_argument("--jobs", type=int, metavar="N", help="cells computed at once (default: all cores)")
    run.add_argument("--time-limit", type=float, metavar="SECONDS", help="stop a cell that takes longer")
    run.add_argument("--quadratic-limit", type=int, metavar="N",
                     help="largest n for methods whose memory grows as n squared (default 20000)")
    run.add_argument("--backend", choices=["local", "dask"],
                     help="where cells run: child processes here (local, default) or a Dask cluster")
    run.add_argument("--scheduler", metavar="ADDRESS",
                     help="with --backend dask: the scheduler to use (default: start a local cluster)")
    run.add_argument("--resume", metavar="RUN_DIR", help="continue an interrupted run of the same suite")
    run.add_argument("--cache", metavar="DIR", help="embedding cache folder (default: the user cache folder)")
    run.add_argument("--no-cache", action="store_true", help="neither read nor fill the embedding cache")
    run.add_argument("--no-report", action="store_true", help="skip the HTML report and figures at the end")
    run.add_argument("--quiet", action="store_true", help="no progress bar and no tables, only the last line")

    val = sub.add_parser("validate", help="check a suite and its data without running anything")
    val.add_argument("suite", help="suite file (YAML)")

    lst = sub.add_parser("list", help="show the datasets, methods or measures foldbench knows")
    lst.add_argument("what", choices=["datasets", "methods", "measures"])

    rep = sub.add_parser("report", help="write the report (HTML page, figures, LaTeX and Markdown tables) of a run")
    rep.add_argument("run_dir", metavar="RUN_DIR")
    rep.add_argument("--quality", default="mean_rank",
                     help="quality axis of the Pareto figure: mean_rank or a measure such as trustworthiness@10")
    rep.add_argument("--alpha", type=float, default=0.05, help="significance level of the rank tests")

    chk = sub.add_parser("check", help="compare a run with a baseline run: exit 1 on a regression")
    chk.add_argument("run_dir", metavar="RUN_DIR")
    chk.add_argument("--baseline", required=True, metavar="DIR", help="the run folder to compare against")
    chk.add_argument("--tolerance", action="append", metavar="MEASURE=VALUE",
                     help="override a tolerance, e.g. stress=0.02 or fit_seconds=0.1+50%% (repeatable)")
    chk.add_argument("--alpha", type=float, help="significance level of the Welch test (default 0.05)")
    chk.add_argument("--junit", metavar="FILE", help="also write JUnit XML, one test case per comparison")
    chk.add_argument("--all", action="store_true", help="also list unchanged comparisons")

    rer = sub.add_parser("rerun", help="run a finished run again from its folder and compare cell by cell")
    rer.add_argument("run_dir", metavar="RUN_DIR")
    rer.add_argument("--out", metavar="DIR", help="root for the new run (default: the original run's root)")
    rer.add_argument("--jobs", type=int, metavar="N", help="cells computed at once")

    cache = sub.add_parser("cache", help="show or empty the embedding cache")
    cache.add_argument("action", choices=["info", "clear"])
    cache.add_argument("--cache", metavar="DIR", help="cache folder (default: the user cache folder)")

    init = sub.add_parser("init", help="write a commented starter suite to edit")
    init.add_argument("path", nargs="?", default="suite.yaml", help="where to write it (default: suite.yaml)")
    init.add_argument("--force", action="store_true", help="overwrite an existing file")
    return p


# ---------------------------------------------------------------- commands

def _cmd_run(args: argparse.Namespace) -> int:
    from .cache import default_cache_dir
    from .pipeline import RunInterrupted, run_suite
    from .report.tables import dataset_table, overall_table
    from .suite import parse_suite

    if bool(args.suite) == bool(args.table):
        raise InputError("foldbench run", "expected either a suite file or --table FILE (not both)")
    if args.label and not args.table:
        raise InputError("--label", "expected only together with --table")
    if args.jobs is not None and args.jobs < 1:
        raise InputError("--jobs", f"expected an integer >= 1, got {args.jobs}")
    if args.time_limit is not None and args.time_limit <= 0:
        raise InputError("--time-limit", f"expected seconds > 0, got {args.time_limit}")
    if args.table:
        table = Path(args.table)
        name = re.sub(r"[^A-Za-z0-9_.-]", "_", table.stem).strip("._-") or "table"
        n = _table_rows(table, args.label)
        suite = parse_suite(table_suite_text(name, table.resolve(), args.label, n), f"{table}")
    else:
        suite = args.suite
    if args.quadratic_limit is not None and args.quadratic_limit < 10:
        raise InputError("--quadratic-limit", f"expected an integer >= 10, got {args.quadratic_limit}")
    if args.no_cache and args.cache:
        raise InputError("--no-cache", "expected either --cache DIR or --no-cache, not both")
    cache = None if args.no_cache else Path(args.cache) if args.cache else default_cache_dir()
    bar = None if args.quiet else _ProgressBar()
    try:
        outcome = run_suite(suite, args.out, jobs=args.jobs, time_limit=args.time_limit,
                            quadratic_limit=args.quadratic_limit, resume=args.resume, cache=cache,
                            backend=args.backend, scheduler=args.scheduler,
                            progress=bar.update if bar else None)
    except RunInterrupted as stopped:
        if bar:
            bar.close()
        source = args.suite or f"--table {args.table}"
        again = f"run {source} --resume {stopped.run_dir}"
        print(f"Interrupted: {stopped.finished} of {stopped.total} cells are stored in {stopped.run_dir}.\n"
              f"Resume with: foldbench {again}", file=sys.stderr)
        return EXIT_INTERRUPTED
    finally:
        if bar:
            bar.close()
    if not args.quiet:
        rank_by = outcome.rank_by
        print("\nAcross datasets (mean of per-dataset mean ranks, 1 = best)\n")
        print(overall_table(outcome.overall))
        for name, group in outcome.summary.groupby("dataset", sort=False):
            print(f"\n{name}\n")
            print(dataset_table(group, rank_by))
        for note in outcome.notes:
            print(f"\nNote: {note}")
        print()
    failed_expectations = _expectations(outcome)
    if not args.no_report:
        from .report import write_report
        page = write_report(outcome.run_dir)
        if not args.quiet:
            print(f"Report: {page}")
    counts = ", ".join(f"{v} {k}" for k, v in sorted(outcome.counts.items()))
    print(f"{sum(outcome.counts.values())} cells ({counts}) in {outcome.seconds:.1f} s -> {outcome.run_dir}")
    return EXIT_FAILED if outcome.failed or failed_expectations else EXIT_OK


def _expectations(outcome) -> int:  # noqa: ANN001 - RunOutcome
    from .expect import evaluate_expectations, expectations_text

    results = evaluate_expectations(outcome.suite, outcome.scores)
    if results:
        print(expectations_text(results))
    return sum(not r.passed for r in results)


def _table_rows(table: Path, label: str | None) -> int:
    from ._params import validate_params
    from .datasets import get_dataset_spec, load_dataset

    spec = get_dataset_spec("table")
    given = {"path": str(table.resolve())} | ({"label": label} if label else {})
    return load_dataset("table", validate_params(given, spec.params, "--table")).n


class _ProgressBar:
    """Cells done / failed / left with elapsed time, on stderr."""

    def __init__(self) -> None:
        from tqdm import tqdm
        tqdm.monitor_interval = 0
        self._bar = None
        self._tqdm = tqdm
        self._status: Counter[str] = Counter()

    def update(self, result, done: int, total: int) -> None:  # noqa: ANN001 - CellResult
        if self._bar is None:
            self._bar = self._tqdm(total=total, unit="cell", dynamic_ncols=True, file=sys.stderr,
                                   bar_format="{l_bar}{bar}| {n_fmt}/{total_fmt} [{elapsed}<{remaining}] {postfix}")
        self._status[result.status] += 1
        bad = sum(v for k, v in self._status.items() if k not in ("ok", "skipped"))
        self._bar.set_postfix_str(f"failed {bad}, left {total - done}", refresh=False)
        self._bar.set_description(f"{result.cell.dataset}/{result.cell.method}", refresh=False)
        self._bar.update(1)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()


def _cmd_validate(args: argparse.Namespace) -> int:
    from .cells import plan
    from .suite import load_datasets, load_suite

    suite = load_suite(args.suite)
    datasets = load_datasets(suite)
    cells, refused = plan(suite, datasets)
    sizes = ", ".join(f"{n} ({d.n} x {d.n_features or 'distances'})" for n, d in datasets.items())
    print(f"{args.suite}: valid. {len(suite.datasets)} datasets: {sizes}; {len(suite.methods)} methods; "
          f"{len(suite.seeds)} seeds; {len(cells)} cells to run" + (f", {len(refused)} refused" if refused else ""))
    for r in {(r.cell.dataset, r.cell.method): r for r in refused}.values():
        print(f"  refused: {r.cell.method} on {r.cell.dataset}: {r.error}")
    return EXIT_OK


def _cmd_list(args: argparse.Namespace) -> int:
    from .datasets import DATASETS
    from .methods import METHODS
    from .metrics import MEASURES

    if args.what == "measures":
        for m in MEASURES.values():
            arrow = "higher is better" if m.higher_is_better else "lower is better"
            k = ", at each k" if m.per_k else ""
            needs = f", needs {m.needs}" if m.needs else ""
            print(f"{m.name}  [{m.scope}; {arrow}{k}{needs}]\n    {m.definition}\n    source: {m.source}")
        return EXIT_OK
    registry = DATASETS if args.what == "datasets" else METHODS
    for spec in registry.values():
        extra = ""
        if args.what == "methods":
            extra = f"  [{spec.family}{'; takes distances' if spec.accepts_distances else ''}]"
        print(f"{spec.name}{extra}\n    {spec.description}")
        for p in spec.params:
            default = ("required" if p.name == "path" else "default: not set") if p.default is None \
                else f"default {p.default!r}"
            choices = f"; one of {', '.join(map(str, p.choices))}" if p.choices else ""
            print(f"    - {p.name} ({p.type_name()}, {default}{choices}): {p.doc}")
    return EXIT_OK


def _cmd_report(args: argparse.Namespace) -> int:
    from .report import write_report

    if not 0 < args.alpha < 1:
        raise InputError("--alpha", f"expected a level between 0 and 1, got {args.alpha}")
    print(f"Report: {write_report(args.run_dir, quality=args.quality, alpha=args.alpha)}")
    return EXIT_OK


def _cmd_check(args: argparse.Namespace) -> int:
    from .check import check_markdown, check_runs, check_text, junit_xml
    from .expect import parse_tolerance_flags
    from .store import write_text

    if args.alpha is not None and not 0 < args.alpha < 1:
        raise InputError("--alpha", f"expected a level between 0 and 1, got {args.alpha}")
    outcome = check_runs(args.run_dir, args.baseline, tolerances=parse_tolerance_flags(args.tolerance or []),
                         alpha=args.alpha)
    print(check_text(outcome, show_unchanged=args.all))
    write_text(Path(args.run_dir) / "check.md", check_markdown(outcome))
    if args.junit:
        write_text(Path(args.junit), junit_xml(outcome))
    return EXIT_OK if outcome.passed else EXIT_FAILED


def _cmd_rerun(args: argparse.Namespace) -> int:
    from .rerun import rerun, rerun_text

    if args.jobs is not None and args.jobs < 1:
        raise InputError("--jobs", f"expected an integer >= 1, got {args.jobs}")
    outcome = rerun(args.run_dir, args.out, jobs=args.jobs)
    print(rerun_text(outcome))
    return EXIT_OK if outcome.reproduced else EXIT_FAILED


def _cmd_cache(args: argparse.Namespace) -> int:
    from .cache import EmbeddingCache, default_cache_dir

    cache = EmbeddingCache(Path(args.cache) if args.cache else default_cache_dir())
    if args.action == "clear":
        print(f"removed {cache.clear()} cached embeddings from {cache.root}")
    else:
        info = cache.info()
        print(f"{info['path']}: {info['entries']} cached embeddings, {info['bytes'] / 2**20:.1f} MiB")
    return EXIT_OK


def _cmd_init(args: argparse.Namespace) -> int:
    path = Path(args.path)
    if path.exists() and not args.force:
        raise InputError(str(path), "already exists; expected a new file name (or --force to overwrite)")
    path.write_text(STARTER_SUITE, encoding="utf-8")
    print(f"wrote {path}; edit it, then: foldbench validate {path} && foldbench run {path}")
    return EXIT_OK


COMMANDS = {"run": _cmd_run, "validate": _cmd_validate, "list": _cmd_list, "init": _cmd_init,
            "cache": _cmd_cache, "report": _cmd_report, "check": _cmd_check, "rerun": _cmd_rerun}


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``foldbench`` command; returns the exit code."""
    parser = _parser()
    try:
        args = parser.parse_args(argv)
        logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                            format="%(levelname)s %(name)s: %(message)s")
        if not args.command:
            parser.print_help()
            return EXIT_INPUT
        return COMMANDS[args.command](args)
    except InputError as err:
        print(f"foldbench: error: {err}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("foldbench: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        # the reader went away (e.g. `foldbench list methods | head`): stop quietly
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
