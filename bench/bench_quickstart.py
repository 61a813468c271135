"""The quickstart suite end to end, and where its time goes: the rows of the performance targets.

Everything is measured in one run, side by side, so that ratios hold on a shared machine:

1. ``foldbench run suites/quickstart.yaml --no-cache`` as a user types it (a fresh Python
   process, cold embedding cache, report included): wall seconds against the 20 s target;
   the run's own timer for the cells; the sums of fit and score seconds inside the cells;
   fitted cells and copies of seed-free ones.
2. Scoring with the data side made once per dataset against scoring each embedding alone:
   every quickstart dataset, a PCA embedding scored ``--repeats`` times each way,
   interleaved, one thread (as a cell of a 2-job run has); the ratio is shared / alone.
3. Per-cell overhead of the local backend: a tiny suite (random projection on iris, many
   seeds, so every cell is fitted and the fit and score take milliseconds) through the same
   command; overhead per cell = (jobs x cell wall - sum of fit and score seconds) / cells.
   That command starts the fork server, whose imports and warm-up the first cells wait for;
   so the same suite is also run twice from this process through ``harness.api.run_suite``,
   and the second run gives the overhead with the fork server already warm.

Usage::

    python bench/bench_quickstart.py               # about 2 minutes on 2 cores
    python bench/bench_quickstart.py --repeats 5
"""

from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

TARGET_WALL = 20.0  # seconds, quickstart whole command (issue target)

TINY = """\
name: tiny
seeds: 40
datasets:
  - use: iris
methods:
  - use: random_projection
measures:
  k: [5]
"""


def _run(suite: Path, out: Path, jobs: int) -> tuple[float, float, pd.DataFrame]:
    """Wall seconds of the command, the run's own cell seconds, and its scores table."""
    cmd = [sys.executable, "-m", "harness", "run", str(suite), "--out", str(out), "--no-cache", "--quiet"]
    cmd += ["--jobs", str(jobs)]
    t0 = time.perf_counter()
    res = subprocess.run(cmd, capture_output=True, text=True, check=False)
    wall = time.perf_counter() - t0
    if res.returncode != 0:
        raise SystemExit(f"bench: {' '.join(cmd)} failed:\n{res.stderr[-2000:]}")
    found = re.search(r"in ([0-9.]+) s ->", res.stdout)
    cells = float(found.group(1)) if found else float("nan")
    scores = pd.read_csv(next(out.glob("*/*/scores.csv")))
    return wall, cells, scores


def _scoring_ratio(repeats: int) -> list[dict]:
    from sklearn.decomposition import PCA
    from threadpoolctl import threadpool_limits

    from harness.config import Scoring
    from harness.metrics import score
    from harness.run import dataside
    from harness.suite import load_datasets, load_suite

    suite = load_suite(ROOT / "suites" / "quickstart.yaml")
    scoring: Scoring = suite.scoring
    rows = []
    with threadpool_limits(1):
        for name, ds in load_datasets(suite).items():
            Y = PCA(2).fit_transform(ds.X)
            args = dict(ks=list(scoring.ks), labels=ds.labels, latent=ds.latent, **scoring.engine_options())
            t0 = time.perf_counter()
            side = dataside.make(ds, scoring)
            make = time.perf_counter() - t0
            alone, shared = [], []
            for _ in range(repeats):
                t0 = time.perf_counter()
                a = score(ds.X, Y, **args)
                alone.append(time.perf_counter() - t0)
                t0 = time.perf_counter()
                b = score(ds.X, Y, prepared=side, **args)
                shared.append(time.perf_counter() - t0)
                assert a.values == b.values
            rows.append(
                {
                    "dataset": f"{name} (n = {ds.n})",
                    "alone": float(np.median(alone)),
                    "shared": float(np.median(shared)),
                    "make": make,
                }
            )
    return rows


def _warm_overhead(folder: Path, suite: Path, jobs: int) -> tuple[float, float, int]:
    """Seconds per cell beyond fit + score, and fit + score per cell, with the fork server warm."""
    from harness.api import run_suite

    run_suite(suite, folder / "first", cache=None, jobs=jobs)  # starts and warms the fork server
    t0 = time.perf_counter()
    outcome = run_suite(suite, folder / "second", cache=None, jobs=jobs)
    wall = time.perf_counter() - t0
    s = outcome.scores
    work = float((s["fit_seconds"] + s["score_seconds"]).sum())
    return (jobs * wall - work) / len(s), work / len(s), len(s)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=os.cpu_count() or 1, help="cells at once")
    parser.add_argument("--repeats", type=int, default=5, help="scorings per dataset and way")
    args = parser.parse_args()

    with tempfile.TemporaryDirectory() as tmp:
        tiny = Path(tmp) / "tiny.yaml"
        tiny.write_text(TINY)
        _run(tiny, Path(tmp) / "warm", args.jobs)  # imports into the page cache, not counted
        wall, cells_wall, scores = _run(ROOT / "suites" / "quickstart.yaml", Path(tmp) / "qs", args.jobs)
        _, t_cells, t_scores = _run(tiny, Path(tmp) / "tiny", args.jobs)
        warm_overhead, warm_work, warm_cells = _warm_overhead(Path(tmp) / "api", tiny, args.jobs)
    scoring = _scoring_ratio(args.repeats)

    copied = scores["copy_of"].fillna("") != ""
    copies = int(copied.sum())
    fit_s, score_s = scores["fit_seconds"][~copied].sum(), scores["score_seconds"][~copied].sum()
    compute = (t_scores["fit_seconds"] + t_scores["score_seconds"]).sum()
    overhead = (args.jobs * t_cells - compute) / len(t_scores)
    load = os.getloadavg()
    print(
        f"machine: {os.cpu_count()} cores, --jobs {args.jobs}, load average at the end "
        f"{load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f} (1 / 5 / 15 min); {time.strftime('%Y-%m-%d')}"
    )
    print()
    print("| what | measured | target | ratio |")
    print("|---|---:|---:|---:|")
    print(
        f"| quickstart, whole command, cold cache, report included | {wall:.1f} s | "
        f"{TARGET_WALL:.0f} s | {wall / TARGET_WALL:.2f} |"
    )
    print(f"| of which the cells (run's own timer) | {cells_wall:.1f} s | | |")
    print(f"| fit seconds summed over fitted cells | {fit_s:.1f} s | | |")
    print(f"| score seconds summed over fitted cells | {score_s:.1f} s | | |")
    print(f"| cells: fitted + copies of seed-free ones | {len(scores) - copies} + {copies} | | |")
    print(
        f"| per-cell overhead (tiny suite, {len(t_scores)} cells, the command) | "
        f"{overhead * 1000:.0f} ms | | |"
    )
    print(
        f"| per-cell overhead, fork server warm ({warm_cells} cells, in one process) | "
        f"{warm_overhead * 1000:.0f} ms | | |"
    )
    print(f"| fit + score of one tiny cell, fork server warm | {warm_work * 1000:.0f} ms | | |")
    print()
    print("| dataset | score alone s | with shared data side s | ratio | making the side s |")
    print("|---|---:|---:|---:|---:|")
    for r in scoring:
        print(
            f"| {r['dataset']} | {r['alone']:.3f} | {r['shared']:.3f} | "
            f"{r['shared'] / r['alone']:.2f} | {r['make']:.3f} |"
        )


if __name__ == "__main__":
    main()
