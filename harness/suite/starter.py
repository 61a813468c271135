"""Suites written for the user: the commented starter and the one-table default."""

from __future__ import annotations

from pathlib import Path

STARTER_SUITE = """\
# A foldbench suite. Check it with `foldbench validate suite.yaml`, run it with
# `foldbench run suite.yaml`. `foldbench list datasets|methods|measures` shows what exists.
name: my-first-suite           # names the results folder: results/<name>/<run id>/
description: Which projection keeps my data's structure best?
seeds: 3                       # 3 seeds (0, 1, 2), or a list such as [0, 7, 42]
dimensions: 2                  # size of every embedding

datasets:
  - use: rolled_sheet          # a registry name
    name: roll                 # label in tables (optional)
    params: {n: 800, noise: 0.05}
  - use: iris
  # Your own table (CSV, TSV, Parquet or NPY); paths are relative to this file:
  # - use: table
  #   name: sensors
  #   params: {path: data/sensors.csv, label: site, standardise: true}

methods:
  - use: pca
  - use: isomap
    grid: {n_neighbors: [8, 15]}     # every value is tried (one cell per value and seed)
  - use: tsne
    params: {init: pca}
    grid: {perplexity: [10, 30]}
  # A model of your own: any class with fit_transform, as package.module:Name
  # - use: mypackage.embedders:MyEmbedder
  #   params: {width: 64}

measures:
  k: [10, 30]                  # neighbourhood sizes for the local measures
  rank_by: [trustworthiness, continuity, shepard_spearman]   # or a mapping of weights

run:
  time_limit: 600              # seconds per cell before it is stopped
"""


def table_suite_text(name: str, path: Path, label: str | None, n: int) -> str:
    """A suite that runs a default method set on one table of ``n`` rows."""
    label_line = f", label: {label!r}" if label else ""
    perplexity = max(2, min(30, (n - 1) // 3 - 1))
    neighbours = max(2, min(10, n - 2))
    # measures need k < n/2 (the trustworthiness normaliser); the table loader accepts n >= 10
    k = max(1, min(10, (n - 1) // 2))
    quadratic = "" if n > 3000 else "  - use: mds\n  - use: sammon\n"
    return (
        f"name: {name}\nseeds: 3\ndimensions: 2\n"
        f"datasets:\n  - use: table\n    name: {name}\n"
        f"    params: {{path: {str(path)!r}{label_line}, standardise: true}}\n"
        "methods:\n  - use: pca\n  - use: random_projection\n"
        f"  - use: isomap\n    params: {{n_neighbors: {neighbours}}}\n"
        f"  - use: laplacian_eigenmaps\n    params: {{n_neighbors: {neighbours}}}\n"
        f"{quadratic}"
        f"  - use: tsne\n    params: {{perplexity: {perplexity}}}\n"
        f"measures:\n  k: [{k}]\n"
    )


def write_starter(path: str | Path, *, force: bool = False) -> Path:
    """Write the commented starter suite to ``path`` (refusing to overwrite unless ``force``)."""
    from ..errors import InputError

    target = Path(path)
    if target.exists() and not force:
        raise InputError(str(target), "already exists; expected a new file name (or --force to overwrite)")
    try:
        target.write_text(STARTER_SUITE, encoding="utf-8")
    except OSError as exc:
        raise InputError(str(target), f"cannot write the starter suite ({exc.strerror or exc})") from None
    return target
