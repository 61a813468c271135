"""Benchmark of one embedding's measures on a Dask cluster against the local engine.

For each n (D = 50 data, a 2-D embedding), interleaved in one process, best of ``--repeat``:

* ``local``      ``harness.metrics.score(X, Y, ks=[10], curve_k_max=100)``: the local engine
                 (two threads on two cores);
* ``dask 1w``    the same with ``backend="dask"`` on a LocalCluster of 1 worker process,
                 one thread (started beforehand: steady state; connecting and sending the
                 data are inside the timing);
* ``dask 2w``    the same on 2 worker processes of one thread each.

Every run's values are checked to equal the local engine's (``==``) before a time is printed.
A second table times the engine's walk alone (the data already on the workers), where the
scaling with workers is not hidden by the parts that stay on the caller.

Then the seconds to send both spaces to 2 workers, and the inputs of the time model of
docs/cluster.md, measured at n = 1,000,000 (``--quick``: 100,000) on one thread exactly as a
worker computes them, on a slice of the query rows: ns per (query, point) pair of the engine's
walk (both spaces, products and ranking) and of its distance products alone, the seconds of the
sampled R_NX area, and what stays on the caller (standardising, global measures).

Usage::

    python bench/bench_cluster_measures.py            # n = 10k and 20k (several minutes)
    python bench/bench_cluster_measures.py --quick    # n = 3k and 6k (about a minute)
"""

from __future__ import annotations

import argparse
import logging
import os
import platform
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from threadpoolctl import threadpool_limits  # noqa: E402

from harness.metrics import score  # noqa: E402
from harness.metrics._cluster import ClusterMeasures, connect  # noqa: E402
from harness.metrics._distances import DistanceRows  # noqa: E402
from harness.metrics._global import global_measures  # noqa: E402
from harness.metrics._local import collect  # noqa: E402
from harness.metrics._memory import block_rows, default_memory_bytes  # noqa: E402
from harness.metrics._ranks import RankWalk  # noqa: E402
from harness.metrics._rnx_area import area_terms, sample_size  # noqa: E402
from harness.metrics._standard import standard_points  # noqa: E402

FULL = (10_000, 20_000)
QUICK = (3_000, 6_000)
#: (n, query rows walked) of the time-model inputs.
MODEL = (1_000_000, 256)
MODEL_QUICK = (100_000, 256)
D = 50
OPTIONS = {"ks": [10], "curve_k_max": 100}


def data(n: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """A 5-dimensional structure in D = 50 (noise in the rest) and a noisy 2-D embedding of it."""
    rng = np.random.default_rng(seed)
    latent = rng.normal(size=(n, 5))
    x = (
        np.concatenate([latent, 0.05 * rng.normal(size=(n, D - 5))], axis=1)
        @ np.linalg.qr(rng.normal(size=(D, D)))[0]
    )
    y = latent[:, :2] + 0.2 * rng.normal(size=(n, 2))
    return x, y


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def at_scale(n: int, rows: int) -> dict[str, float]:
    """What one worker thread costs at ``n`` points, from ``rows`` query rows, without a cluster.

    A worker computes exactly this (``RankWalk(..., lanes=1)`` under one BLAS thread); only a
    slice of the query rows is walked, as the cost of a row does not depend on which row it is.
    """
    x, y = data(n, seed=1)
    prep, (xs, ys) = timed(lambda: (standard_points(x), standard_points(y)))
    data_rows, emb_rows = DistanceRows(points=xs), DistanceRows(points=ys)
    step = block_rows(n, n, default_memory_bytes(), data_rows.nbytes + emb_rows.nbytes + n * 64)
    queries = np.arange(min(n, max(rows, step)))
    m = sample_size(n, 2000)
    area_rows = np.arange(min(m, 20))
    with threadpool_limits(1):
        walk, _ = timed(
            lambda: collect(RankWalk(data_rows, emb_rows, queries, 100, step, lanes=1), n, [10], 100)
        )
        area, _ = timed(lambda: area_terms(data_rows, emb_rows, area_rows))
        buf = np.empty((step, n))
        t0 = time.perf_counter()
        for start in range(0, len(queries), step):
            q = queries[start : start + step]
            data_rows.block(q, out=buf[: len(q)])
            emb_rows.block(q, out=buf[: len(q)])
        products = time.perf_counter() - t0
    here, _ = timed(
        lambda: global_measures(
            xs,
            None,
            ys,
            None,
            pair_sample_above=5000,
            n_pairs=200_000,
            seed=0,
            memory_bytes=default_memory_bytes(),
        )
    )
    pairs = len(queries) * n
    return {
        "rows": len(queries),
        "walk_ns": walk / pairs * 1e9,
        "product_ns": products / pairs * 1e9,
        "area_s": area / len(area_rows) * m,
        "area_queries": m,
        "caller_s": here + prep,
        "send_mb": (data_rows.nbytes + emb_rows.nbytes) / 2**20,
    }


def walk_seconds(x: np.ndarray, y: np.ndarray, clusters: dict, repeat: int) -> dict:
    """Best seconds of the engine's walk alone (K = 100): local (its own threads) and per cluster.

    The data are on the workers before the clock starts; each cluster's per-point terms are
    checked to equal the local ones.
    """
    n = len(x)
    data_rows, emb_rows = DistanceRows(points=standard_points(x)), DistanceRows(points=standard_points(y))
    queries = np.arange(n)
    step = block_rows(n, n, default_memory_bytes(), data_rows.nbytes + emb_rows.nbytes + n * 64)
    best: dict = {"local": np.inf}
    reference = None
    for _ in range(repeat):
        seconds, reference = timed(
            lambda: collect(RankWalk(data_rows, emb_rows, queries, 100, step), n, [10], 100)
        )
        best["local"] = min(best["local"], seconds)
    for workers, cluster in clusters.items():
        best[workers] = np.inf
        with connect(cluster.scheduler_address) as client:
            spread = ClusterMeasures(client, data_rows, emb_rows)
            for _ in range(repeat):
                seconds, terms = timed(lambda s=spread: s.local_terms(queries, 100, step, [10], 100))
                best[workers] = min(best[workers], seconds)
                same = all(np.array_equal(terms.terms[k], reference.terms[k]) for k in reference.terms)
                if not same or not np.array_equal(terms.overlap_sum, reference.overlap_sum):
                    raise SystemExit(f"the walk on {workers} workers differs from the local engine at n={n}")
            spread.close()
    return best


def send_seconds(n: int, scheduler: str) -> float:
    """Seconds to connect and broadcast both spaces of ``n`` points to the cluster's workers."""
    x, y = data(n)
    rows = DistanceRows(points=standard_points(x)), DistanceRows(points=standard_points(y))
    t0 = time.perf_counter()
    with connect(scheduler) as client:
        ClusterMeasures(client, *rows).close()
    return time.perf_counter() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="n = 3k and 6k; model inputs at 100k")
    parser.add_argument("--repeat", type=int, default=2, help="timings per set-up and n (best is shown)")
    args = parser.parse_args()
    logging.basicConfig(level=logging.WARNING)
    import distributed

    sizes = QUICK if args.quick else FULL
    print(f"# {datetime.now(UTC):%Y-%m-%d %H:%M} UTC, {platform.machine()}, {os.cpu_count()} CPUs, D = {D}")
    print(f"# command: python bench/bench_cluster_measures.py{' --quick' if args.quick else ''}")
    clusters = {
        workers: distributed.LocalCluster(
            n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0", silence_logs=40
        )
        for workers in (1, 2)
    }
    # A client leaving logs a closed stream with its traceback at INFO level on the scheduler (here).
    logging.getLogger("distributed").setLevel(logging.WARNING)
    try:
        print("| n | local s | dask 1w s | dask 2w s | 1w / local | 2w / local | 2w / 1w |")
        print("|---|---|---|---|---|---|---|")
        for n in sizes:
            x, y = data(n)
            best = {"local": np.inf, 1: np.inf, 2: np.inf}
            for _ in range(args.repeat):
                seconds, reference = timed(lambda x=x, y=y: score(x, y, **OPTIONS))
                best["local"] = min(best["local"], seconds)
                for workers, cluster in clusters.items():
                    seconds, spread = timed(
                        lambda x=x, y=y, a=cluster.scheduler_address: score(
                            x, y, **OPTIONS, backend="dask", scheduler=a
                        )
                    )
                    if spread.values != reference.values or not spread.curve.equals(reference.curve):
                        raise SystemExit(
                            f"dask with {workers} workers differs from the local engine at n={n}"
                        )
                    best[workers] = min(best[workers], seconds)
            loc, one, two = best["local"], best[1], best[2]
            ratios = f"{one / loc:.2f} | {two / loc:.2f} | {two / one:.2f}"
            print(f"| {n:,} | {loc:.2f} | {one:.2f} | {two:.2f} | {ratios} |")
        print("\nthe engine's walk alone (K = 100; data already on the workers):\n")
        print("| n | local s | dask 1w s | dask 2w s | 1w / local | 2w / local | 2w / 1w |")
        print("|---|---|---|---|---|---|---|")
        for n in sizes:
            best = walk_seconds(*data(n), clusters, args.repeat)
            loc, one, two = best["local"], best[1], best[2]
            ratios = f"{one / loc:.2f} | {two / loc:.2f} | {two / one:.2f}"
            print(f"| {n:,} | {loc:.2f} | {one:.2f} | {two:.2f} | {ratios} |")
        send = send_seconds(sizes[-1], clusters[2].scheduler_address)
    finally:
        for cluster in clusters.values():
            cluster.close()
    print(f"\nconnecting and sending both spaces of {sizes[-1]:,} points to 2 workers: {send:.2f} s")
    inputs = at_scale(*(MODEL_QUICK if args.quick else MODEL))
    n_model = (MODEL_QUICK if args.quick else MODEL)[0]
    print(f"\ntime-model inputs at n = {n_model:,}, one thread, {inputs['rows']:.0f} query rows walked:")
    print(f"  engine walk (K = 100), per (query, point) pair : {inputs['walk_ns']:.2f} ns")
    print(f"  its distance products alone (both spaces)      : {inputs['product_ns']:.2f} ns")
    print(
        f"  sampled R_NX area ({inputs['area_queries']:.0f} queries), one thread : {inputs['area_s']:.2f} s"
    )
    print(f"  on the caller: standardising, global measures  : {inputs['caller_s']:.2f} s")
    print(f"  both spaces, sent to every worker              : {inputs['send_mb']:.0f} MB")


if __name__ == "__main__":
    main()
