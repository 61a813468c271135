"""Benchmark of the two backends on this machine: the local one and a Dask cluster.

Two suites, each run by three set-ups, all in one process:

* ``local``          harness.run.backends.execute (a fork-server child per cell);
* ``dask (start)``   the same with ``backend="dask"`` and no scheduler: it starts a
                     local cluster of ``jobs`` worker processes and closes it, inside the timing;
* ``dask (running)`` the same against a cluster started beforehand (steady state).

Suites: ``tiny`` (PCA on iris, many seeds), where almost everything is overhead (run
first, so it also warms up imports), and the quickstart suite (``--quick``: a smaller
variant of it), where fitting dominates.

Columns: wall seconds; cells; compute = the sum over cells of fit + score seconds as
measured inside the cells; overhead per cell = (jobs x wall - compute) / cells, the
worker-seconds per cell not spent fitting or scoring (start-up, data transfer,
scheduling, collecting results).

Usage::

    python bench/bench_backends.py            # quickstart suite (several minutes on 2 cores)
    python bench/bench_backends.py --quick    # smaller variant (about a minute)
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from harness.run.backends import Execution, execute  # noqa: E402
from harness.run.cells import plan  # noqa: E402
from harness.suite import load_datasets, load_suite, parse_suite  # noqa: E402

QUICK = """\
name: quickstart-small
seeds: 2
datasets:
  - use: rolled_sheet
    name: roll
    params: {n: 300, noise: 0.05}
  - use: machine_fleet
    name: fleet
    params: {n: 200}
  - use: iris
methods:
  - use: pca
  - use: mds
    params: {max_iter: 150}
  - use: isomap
    params: {n_neighbors: 10}
  - use: tsne
    params: {perplexity: 30}
measures:
  k: [10, 30]
"""

TINY = """\
name: tiny
seeds: 40
datasets:
  - use: iris
methods:
  - use: pca
measures:
  k: [5]
"""


def _measure(label: str, run, cells, datasets, scoring, jobs: int) -> dict:
    t0 = time.perf_counter()
    results = list(run(cells, datasets, scoring))
    wall = time.perf_counter() - t0
    compute = sum(
        r.fit_seconds + r.score_seconds
        for r in results
        if not (math.isnan(r.fit_seconds) or math.isnan(r.score_seconds))
    )
    ok = sum(r.status == "ok" for r in results)
    return {
        "setup": label,
        "wall": wall,
        "cells": len(results),
        "ok": ok,
        "compute": compute,
        "overhead": (jobs * wall - compute) / len(results),
    }


def _suite_rows(name: str, suite, jobs: int, address: str) -> list[dict]:
    datasets = load_datasets(suite)
    cells, _ = plan(suite, datasets)
    execution = Execution(jobs=jobs)
    on_cluster = Execution(jobs=jobs, scheduler=address)
    setups = [
        ("local", lambda c, d, s: execute(c, d, s, execution)),
        ("dask (start)", lambda c, d, s: execute(c, d, s, execution, backend="dask")),
        ("dask (running)", lambda c, d, s: execute(c, d, s, on_cluster, backend="dask")),
    ]
    rows = []
    for label, run in setups:
        row = _measure(label, run, cells, datasets, suite.scoring, jobs)
        row["suite"] = name
        rows.append(row)
        print(f"  {name:<18} {label:<15} {row['wall']:7.1f} s", file=sys.stderr, flush=True)
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="a smaller variant of the quickstart suite")
    parser.add_argument("--jobs", type=int, default=os.cpu_count() or 1, help="cells at once / workers")
    args = parser.parse_args()

    from distributed import LocalCluster

    big = parse_suite(QUICK) if args.quick else load_suite(ROOT / "suites" / "quickstart.yaml")
    with LocalCluster(
        n_workers=args.jobs, threads_per_worker=1, processes=True, dashboard_address=":0", silence_logs=40
    ) as cluster:
        # tiny first: it also warms up imports and the fork server before the timed big suite
        rows = _suite_rows("tiny", parse_suite(TINY), args.jobs, cluster.scheduler_address)
        rows += _suite_rows(big.name, big, args.jobs, cluster.scheduler_address)

    load = os.getloadavg()
    print(
        f"machine: {os.cpu_count()} cores, jobs = workers = {args.jobs}, "
        f"load average at the end {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f} (1 / 5 / 15 min)"
    )
    print()
    print("| suite | backend | wall s | cells (ok) | fit+score s | overhead s/cell |")
    print("|---|---|---:|---:|---:|---:|")
    for r in rows:
        print(
            f"| {r['suite']} | {r['setup']} | {r['wall']:.1f} | {r['cells']} ({r['ok']}) | "
            f"{r['compute']:.1f} | {r['overhead']:.3f} |"
        )


if __name__ == "__main__":
    main()
