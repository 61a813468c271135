"""``foldbench choose``: a method configuration for a table (or a suite's data) within a time budget."""

from __future__ import annotations

import argparse
import sys

from ..errors import InputError
from ._base import EXIT_INTERRUPTED, EXIT_OK, Command, positive_int, writable_folders

CARES = ("local", "global", "balanced", "labels")


def _arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "data",
        help="a table file (CSV, TSV, Parquet, NPY), a dataset name (e.g. machine_fleet) "
        "or a suite file whose methods and grids are the candidates",
    )
    parser.add_argument("--label", metavar="COLUMN", help="with a table: the column holding class labels")
    parser.add_argument(
        "--budget", default="10m", help="time for the whole choice: 90s, 10m, 1.5h (default 10m)"
    )
    parser.add_argument(
        "--care",
        default="balanced",
        help="what the ranking weighs: local, global, balanced (default) or labels",
    )
    parser.add_argument("--dimensions", type=int, metavar="D", help="size of the embeddings (default 2)")
    parser.add_argument(
        "--out",
        metavar="DIR",
        help="folder of this choice (the same command again continues it; default results/choose/<data>)",
    )
    parser.add_argument("--jobs", type=int, metavar="N", help="cells computed at once (default: all cores)")
    parser.add_argument(
        "--audit",
        action="store_true",
        help="also run every candidate on all the data and show where the pick ranks (slow)",
    )
    parser.add_argument("--quiet", action="store_true", help="only the winner line")


def _handler(args: argparse.Namespace) -> int:
    from ..choose import choose, parse_budget, recommendation_text
    from ..run import RunInterrupted

    parse_budget(args.budget)  # a bad budget is refused before anything is read
    if args.care not in CARES:
        raise InputError("--care", f"expected one of {', '.join(CARES)}, got {args.care!r}")
    positive_int(args.jobs, "--jobs")
    positive_int(args.dimensions, "--dimensions")
    if args.out:
        writable_folders((args.out, "--out", True))
    news = None if args.quiet else (lambda line: print(line, file=sys.stderr))
    try:
        rec = choose(
            args.data,
            budget=args.budget,
            care=args.care,
            label=args.label,
            dimensions=args.dimensions,
            out=args.out,
            jobs=args.jobs,
            audit=args.audit,
            progress=news,
        )
    except RunInterrupted:
        print(
            f"Interrupted; finished rungs and cells are kept in {args.out or 'results/choose/<data>'}.\n"
            f"Continue with the same command (same --out).",
            file=sys.stderr,
        )
        return EXIT_INTERRUPTED
    if not args.quiet:
        print(recommendation_text(rec))
    winner = rec.winner or "none"
    print(f"Winner: {winner}; recommendation.md and chosen.yaml in {rec.out}")
    return EXIT_OK


COMMANDS = [
    Command(
        "choose",
        "pick a method configuration for your data within a time budget",
        _arguments,
        _handler,
        "Pick a method configuration for a table (or a suite's data) within a time budget: every candidate "
        "on a small subsample, the best third on three times as many rows, and so on until the finalists "
        "run on all the data with every seed.",
    )
]
