"""``foldbench score``: score embeddings that already exist against the data they came from."""

from __future__ import annotations

import argparse
import re
from pathlib import Path
from typing import Any

import yaml

from ..errors import InputError
from ._base import EXIT_INTERRUPTED, Command

_TABLES = (".csv", ".tsv", ".tab", ".parquet", ".pq")


def _arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("data", help="the data the embeddings were made from: a table or an .h5ad file")
    p.add_argument(
        "embeddings",
        nargs="*",
        metavar="EMBEDDING",
        help="embedding files (.npy, .csv, .tsv, .parquet, or .h5ad with --obsm)",
    )
    p.add_argument("--obsm", action="append", default=[], metavar="KEY", help="an obsm key of the .h5ad data")
    p.add_argument("--label", metavar="COLUMN", help="column (or obs column) holding class labels")
    p.add_argument("--id-column", metavar="COLUMN", help="column of row ids in the data and embedding tables")
    p.add_argument("--k", action="append", metavar="K", help="neighbourhood sizes: 10 or 10,30 (repeatable)")
    p.add_argument("--out", default="results", metavar="DIR", help="root folder of runs (default: results)")
    p.add_argument("--no-report", action="store_true", help="skip the HTML report and figures at the end")
    p.add_argument("--quiet", action="store_true", help="no tables, only the last line")


def _entry_name(text: str, taken: set[str]) -> str:
    base = re.sub(r"[^A-Za-z0-9_.-]", "_", text).strip("._-") or "embedding"
    name, i = base, 2
    while name in taken:
        name, i = f"{base}_{i}", i + 1
    taken.add(name)
    return name


def _dataset_entry(args: argparse.Namespace) -> dict[str, Any]:
    data = Path(args.data)
    suffix = data.suffix.lower()
    if not data.is_file():
        raise InputError(args.data, "an existing data file (a table or an .h5ad file); file not found")
    if suffix == ".h5ad":
        if args.id_column:
            raise InputError("--id-column", "expected only for tables; an .h5ad file's ids are its obs_names")
        params = {"path": str(data.resolve())} | ({"label": args.label} if args.label else {})
        return {"use": "anndata", "name": _entry_name(data.stem, set()), "params": params}
    if suffix not in (*_TABLES, ".npy"):
        raise InputError(args.data, f"a table ({', '.join(_TABLES)}, .npy) or an .h5ad file; got '{suffix}'")
    params = {"path": str(data.resolve())}
    if args.label:
        params["label"] = args.label
    if args.id_column:
        params["id_column"] = args.id_column
    return {"use": "table", "name": _entry_name(data.stem, set()), "params": params}


def _method_entries(args: argparse.Namespace) -> list[dict[str, Any]]:
    if args.obsm and Path(args.data).suffix.lower() != ".h5ad":
        raise InputError("--obsm", "expected only when the data is an .h5ad file")
    if not args.embeddings and not args.obsm:
        raise InputError("foldbench score", "expected at least one embedding file or --obsm KEY")
    taken: set[str] = set()
    entries = []
    for key in args.obsm:
        params = {"path": str(Path(args.data).resolve()), "obsm": key}
        entries.append({"use": "embedding_file", "name": _entry_name(key, taken), "params": params})
    for file in args.embeddings:
        path = Path(file)
        if not path.is_file():
            raise InputError(file, "an existing embedding file; file not found")
        params = {"path": str(path.resolve())}
        if args.id_column and path.suffix.lower() in _TABLES:
            params["id_column"] = args.id_column
        entries.append({"use": "embedding_file", "name": _entry_name(path.stem, taken), "params": params})
    return entries


def _ks(flags: list[str]) -> list[int]:
    ks: set[int] = set()
    for flag in flags:
        for part in flag.split(","):
            try:
                ks.add(int(part))
            except ValueError:
                raise InputError("--k", f"expected whole numbers such as 10 or 10,30, got {flag!r}") from None
    return sorted(ks)


def score_suite_text(args: argparse.Namespace) -> tuple[str, int]:
    """The suite that scores the given files: one dataset, one ``embedding_file`` entry per file.

    Returns the YAML text and the embeddings' common dimension (read from the files).
    """
    from ..methods.files import read_embedding

    dataset = _dataset_entry(args)
    methods = _method_entries(args)
    dims = {}
    for m in methods:
        p = m["params"]
        Y, _ = read_embedding(p["path"], id_column=p.get("id_column"), obsm=p.get("obsm"))
        dims[m["name"]] = Y.shape[1]
    if len(set(dims.values())) > 1:
        shown = ", ".join(f"{k}: {v}" for k, v in dims.items())
        raise InputError("foldbench score", f"embeddings of one dimension to compare, got {shown}")
    doc = {
        "name": dataset["name"],
        "description": "Embeddings made elsewhere, scored against their data by foldbench score.",
        "seeds": 1,
        "dimensions": next(iter(dims.values())),
        "datasets": [dataset],
        "methods": methods,
    }
    if args.k:
        doc["measures"] = {"k": _ks(args.k)}
    return yaml.safe_dump(doc, sort_keys=False), doc["dimensions"]


def _handler(args: argparse.Namespace) -> int:
    from ..api import run_suite
    from ..run import RunInterrupted, plan
    from ..suite import load_datasets, parse_suite
    from .run import _finish

    text, _ = score_suite_text(args)
    suite = parse_suite(text, str(Path(args.data)))
    if not args.k:
        # k = 10 (common practice, no source), smaller for tiny tables so that k < n / 2.
        n = next(iter(load_datasets(suite).values())).n
        doc = yaml.safe_load(text) | {"measures": {"k": [max(1, min(10, (n - 1) // 2 - 1))]}}
        text = yaml.safe_dump(doc, sort_keys=False)
        suite = parse_suite(text, str(Path(args.data)))
    _cells, refused = plan(suite, load_datasets(suite))
    if refused:
        first = refused[0]
        raise InputError(f"embedding '{first.cell.method}'", f"a file that matches the data: {first.error}")
    try:
        outcome = run_suite(suite, args.out, jobs=1, cache=None)
    except RunInterrupted as stopped:
        print(f"Interrupted: {stopped.finished} of {stopped.total} cells are stored in {stopped.run_dir}.")
        return EXIT_INTERRUPTED
    return _finish(outcome, args)


COMMANDS = [
    Command(
        "score",
        "score embeddings made elsewhere (files) against their data",
        _arguments,
        _handler,
        "Score embeddings that already exist (.npy, CSV/TSV/Parquet tables, or obsm arrays of an "
        ".h5ad file) against the data they were made from, and rank them like a run.",
    )
]
