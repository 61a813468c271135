"""Benchmark of the neighbourhood engine: wall seconds and peak memory per measurement.

Each measurement runs in a fresh subprocess so that its peak resident memory
(``VmHWM``, which includes the generated data) is its own.  Measurements:

* ``sklearn``  scikit-learn's ``trustworthiness`` at k = 10 (skipped above 20,000
  points, where its n x n matrices do not fit);
* ``local``    foldbench's full local set: trustworthiness, continuity, recall,
  MRRE, LCMC at k = 10 and the Q_NX / R_NX curve and its area to K = 100;
* ``evaluate`` ``harness.evaluate(x, y, k=10)``: every measure (global ones, the full-range
  R_NX area, ...), the issue's target of 0.1x scikit-learn's ``trustworthiness``;
* ``floor``    the blockwise distance products alone, both spaces, same blocks;
* ``sampled``  the local set estimated from 2,000 query points.

Data: standard normal points in D dimensions (seeded); embedding: a seeded
Gaussian random projection to 2 dimensions.

The machine may be shared, so every row up to ``REPEAT_MAX_N`` points runs its
three measurements ``--repeat`` times, interleaved (sklearn, local, floor,
sklearn, local, floor, ...), and reports the fastest of each: the ratios are
taken side by side under the same load.  The 1-minute load average at the end
of each row is printed with it.

Usage::

    python bench/bench_measures.py            # full table (long: tens of minutes)
    python bench/bench_measures.py --quick    # n = 2k, 5k, 10k only, no 1M estimate
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

import numpy as np

SKLEARN_MAX_N = 20_000
FULL = [(2_000, 50), (5_000, 50), (10_000, 50), (20_000, 50), (50_000, 50), (100_000, 50), (20_000, 784)]
QUICK = [(2_000, 50), (5_000, 50), (10_000, 50)]
SAMPLED = (1_000_000, 50, 2_000)
K_CURVE = 100
K = 10
#: Rows with more points than this are measured once (they take minutes).
REPEAT_MAX_N = 20_000


def _data(n: int, d: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(n * 1000 + d)
    x = rng.standard_normal((n, d))
    y = x @ rng.standard_normal((d, 2)) / np.sqrt(d)
    return x, y


def _peak_rss_mib() -> float:
    with open("/proc/self/status") as status:
        for line in status:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _child(kind: str, n: int, d: int, m: int) -> dict:
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    from harness import metrics
    from harness.metrics._distances import DistanceRows
    from harness.metrics._memory import block_rows, default_memory_bytes

    x, y = _data(n, d)
    start = time.perf_counter()
    if kind == "sklearn":
        from sklearn.manifold import trustworthiness

        value = trustworthiness(x, y, n_neighbors=K)
    elif kind in ("local", "sampled"):
        queries = (
            np.arange(n) if kind == "local" else np.sort(np.random.default_rng(0).choice(n, m, replace=False))
        )
        terms = metrics._local(*metrics._rows(x, None, y), [K], K_CURVE, queries, default_memory_bytes())
        value = float(terms.terms[f"trustworthiness@{K}"].mean())
    elif kind == "evaluate":
        value = metrics.evaluate(x, y, k=K)["trustworthiness"]
    elif kind == "floor":
        data, emb = DistanceRows(points=x), DistanceRows(points=y)
        rows = block_rows(n, n, default_memory_bytes(), data.nbytes + emb.nbytes)
        buf = np.empty((rows, n))
        for s in range(0, n, rows):
            idx = np.arange(s, min(n, s + rows))
            data.block(idx, out=buf[: len(idx)])
            emb.block(idx, out=buf[: len(idx)])
        value = float("nan")
    else:
        raise SystemExit(f"unknown kind {kind}")
    return {"seconds": time.perf_counter() - start, "peak_mib": _peak_rss_mib(), "value": value}


def _run(kind: str, n: int, d: int, m: int = 0) -> dict | None:
    cmd = [sys.executable, os.path.abspath(__file__), "--child", kind, str(n), str(d), str(m)]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    if proc.returncode != 0:
        return {"error": proc.stderr.strip().splitlines()[-1] if proc.stderr else f"exit {proc.returncode}"}
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _fastest(runs: list[dict | None]) -> dict | None:
    ok = [r for r in runs if r is not None and "error" not in r]
    return min(ok, key=lambda r: r["seconds"]) if ok else (runs[0] if runs else None)


def _cell(r: dict | None) -> str:
    if r is None:
        return "does not fit"
    if "error" in r:
        return "failed: " + r["error"][:40]
    return f"{r['seconds']:8.1f} s {r['peak_mib'] / 1024:6.2f} GiB"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes only, no 1M estimate")
    parser.add_argument(
        "--repeat",
        type=int,
        default=2,
        help=f"interleaved repetitions of rows up to {REPEAT_MAX_N} points (fastest kept)",
    )
    parser.add_argument("--child", nargs=4, metavar=("KIND", "N", "D", "M"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        kind, n, d, m = args.child
        print(json.dumps(_child(kind, int(n), int(d), int(m))))
        return

    print(f"cpus={os.cpu_count()}  numpy={np.__version__}  k={K}  curve to K={K_CURVE}")
    header = (
        f"{'n':>9} {'D':>4} | {'scikit-learn trustworthiness':>28} | {'foldbench local set':>22} | "
        f"{'distance floor':>22} | {'local/floor':>11} | {'sklearn/local':>13} | "
        f"{'harness.evaluate':>22} | {'evaluate/sklearn':>16} | load"
    )
    print(header)
    print("-" * len(header))
    for n, d in QUICK if args.quick else FULL:
        repeat = max(1, args.repeat) if n <= REPEAT_MAX_N else 1
        runs: dict[str, list[dict | None]] = {"sklearn": [], "local": [], "floor": [], "evaluate": []}
        for _ in range(repeat):
            for kind, done in runs.items():
                if kind != "sklearn" or n <= SKLEARN_MAX_N:
                    done.append(_run(kind, n, d))
        sk, loc, flo, ev = (_fastest(runs[kind]) for kind in ("sklearn", "local", "floor", "evaluate"))
        ratio = (
            f"{loc['seconds'] / flo['seconds']:11.2f}"
            if loc and flo and "error" not in loc and "error" not in flo
            else f"{'-':>11}"
        )
        speed = (
            f"{sk['seconds'] / loc['seconds']:13.1f}"
            if sk and "error" not in sk and "error" not in loc
            else f"{'-':>13}"
        )
        versus = (
            f"{ev['seconds'] / sk['seconds']:16.2f}"
            if sk and ev and "error" not in sk and "error" not in ev
            else f"{'-':>16}"
        )
        print(
            f"{n:>9} {d:>4} | {_cell(sk):>28} | {_cell(loc):>22} | {_cell(flo):>22} | {ratio} | {speed} | "
            f"{_cell(ev):>22} | {versus} | {os.getloadavg()[0]:.1f}",
            flush=True,
        )
    if not args.quick:
        n, d, m = SAMPLED
        est = _run("sampled", n, d, m)
        print(f"sampled estimate n={n} D={d} m={m}: {_cell(est)}  load {os.getloadavg()[0]:.1f}", flush=True)


if __name__ == "__main__":
    main()
