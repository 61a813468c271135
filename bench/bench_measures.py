"""Benchmark of the neighbourhood engine: the issue's target rows, then an optional full table.

Target rows (the default), measured side by side **in one process**, interleaved
(floor, local, evaluate, sklearn, floor, local, ...) ``--repeat`` times, the
fastest of each kept, so that the ratios are taken under the same load:

* ``floor``    the blockwise distance products alone, both spaces, the engine's
  block size, computed as the engine does (one single-threaded BLAS per lane,
  two lanes) and with numpy's default BLAS threads; the faster of the two counts;
* ``local``    foldbench's full local set, ``harness.coranking_curve(X, Y, 100)``'s
  engine: trustworthiness, continuity, recall, MRRE, LCMC at k = 10 and the
  Q_NX / R_NX curve to K = 100;
* ``evaluate`` ``harness.evaluate(x, y, k=10)``: every measure (global ones, the
  full-range R_NX area, ...);
* ``sklearn``  scikit-learn's ``trustworthiness`` at k = 10.

Each row prints its ratio beside its target: local/floor <= 3 at n = 2,000 and
<= 2 at n = 10,000; evaluate/sklearn <= 0.1 at n = 10,000.  ``--big`` adds
n = 100,000 (floor, local and evaluate once each, in a child process whose peak
resident memory is printed; target evaluate/floor <= 2.5 and <= 1 GB).  The
one-time cost of loading the compiled kernel (numba import and its on-disk
cache) is printed apart: it is paid once per process (the runner's fork server
pays it before any cell starts).  The 1-minute load average is printed with
every row.

Data: standard normal points in D = 50 dimensions (seeded); embedding: a seeded
Gaussian random projection to 2 dimensions.

``--table`` prints the older table instead: each measurement in a fresh
subprocess (its own peak RSS, ``VmHWM``, data included), up to n = 100,000 and a
sampled 1M estimate (``--quick``: n = 2k, 5k, 10k only).

Usage::

    python bench/bench_measures.py                  # target rows, n = 2k and 10k
    python bench/bench_measures.py --big            # ... and n = 100k (minutes)
    python bench/bench_measures.py --table --quick  # per-subprocess table, small sizes
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
    from harness.metrics._memory import default_memory_bytes

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
        _products(x, y)
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


def _table(args: argparse.Namespace) -> None:
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


#: Target rows: n, and the targets of local/floor and evaluate/sklearn there (None: no target).
TARGETS = [(2_000, 3.0, None), (10_000, 2.0, 0.1)]
BIG = 100_000
#: Target rows up to this size run five times as many repetitions.
SMALL_N = 2_000
BIG_TARGET = (2.5, 1.0)  # evaluate/floor, GiB


def _floor_lanes(data: object, emb: object, n: int, rows: int) -> None:
    """The products as the engine computes them: lanes of single-threaded BLAS, one block each."""
    from concurrent.futures import ThreadPoolExecutor

    from threadpoolctl import threadpool_limits

    from harness.metrics._ranks import lanes_for

    starts = list(range(0, n, rows))
    lanes = lanes_for(len(starts))
    bufs = [np.empty((rows, n)) for _ in range(lanes)]

    def one(i: int) -> None:
        buf = bufs[i % lanes]
        for s in starts[i::lanes]:
            idx = np.arange(s, min(n, s + rows))
            data.block(idx, out=buf[: len(idx)])  # type: ignore[attr-defined]
            emb.block(idx, out=buf[: len(idx)])  # type: ignore[attr-defined]

    with (
        threadpool_limits(limits=1 if lanes > 1 else None, user_api="blas"),
        ThreadPoolExecutor(lanes) as pool,
    ):
        list(pool.map(one, range(lanes)))


def _products(x: np.ndarray, y: np.ndarray) -> None:
    """The floor: both spaces' distance rows by blocks, as the engine computes them, and nothing else."""
    from harness.metrics._distances import DistanceRows
    from harness.metrics._memory import block_rows, default_memory_bytes

    n = len(x)
    data, emb = DistanceRows(points=x), DistanceRows(points=y)
    rows = block_rows(n, n, default_memory_bytes(), data.nbytes + emb.nbytes)
    buf = np.empty((rows, n))
    for s in range(0, n, rows):
        idx = np.arange(s, min(n, s + rows))
        data.block(idx, out=buf[: len(idx)])
        emb.block(idx, out=buf[: len(idx)])


def _measures(n: int, d: int) -> dict:
    """Callables of one target row, on that row's data."""
    import harness
    from harness import metrics
    from harness.metrics._distances import DistanceRows
    from harness.metrics._memory import block_rows, default_memory_bytes

    x, y = _data(n, d)

    def floor() -> None:
        _products(x, y)

    def floor_lanes() -> None:
        data, emb = DistanceRows(points=x), DistanceRows(points=y)
        _floor_lanes(data, emb, n, block_rows(n, n, default_memory_bytes(), data.nbytes + emb.nbytes))

    def local() -> None:
        metrics._local(*metrics._rows(x, None, y), [K], K_CURVE, np.arange(n), default_memory_bytes())

    def evaluate() -> None:
        harness.evaluate(x, y, k=K)

    def sklearn() -> None:
        from sklearn.manifold import trustworthiness

        trustworthiness(x, y, n_neighbors=K)

    return {
        "floor": floor,
        "floor_lanes": floor_lanes,
        "local": local,
        "evaluate": evaluate,
        "sklearn": sklearn,
    }


def _interleaved(n: int, d: int, repeat: int, kinds: tuple[str, ...]) -> dict[str, float]:
    calls = _measures(n, d)
    best = dict.fromkeys(kinds, float("inf"))
    for _ in range(repeat):
        for kind in kinds:
            start = time.perf_counter()
            calls[kind]()
            best[kind] = min(best[kind], time.perf_counter() - start)
    return best


def _verdict(ratio: float, target: float) -> str:
    return f"{ratio:6.2f} (target <= {target:g}: {'met' if ratio <= target else 'missed'})"


def _load_cost() -> float:
    """Seconds to import the compiled kernels and run them once (numba import, on-disk cache)."""
    start = time.perf_counter()
    from harness.metrics._kernel import full_ranks, rank_rows, sort_order, tie_blocks

    d = np.zeros((2, 6))
    out = np.empty((2, 2), dtype=np.int64)
    rank_rows(d.copy(), d.copy(), np.arange(2), 2, 2, out, out.copy())
    full_ranks(d.copy(), np.arange(2), np.empty((2, 6), dtype=np.int32))
    tie_blocks(d[0], sort_order(d[0]))
    return time.perf_counter() - start


def _targets(args: argparse.Namespace) -> None:
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    print(
        f"cpus={os.cpu_count()}  numpy={np.__version__}  D=50  k={K}  curve to K={K_CURVE}  "
        f"fastest of {args.repeat} (x5 at n <= {SMALL_N}), interleaved in one process"
    )
    import harness.metrics._distances  # noqa: F401  (the package itself is not part of the kernel's load)

    print(f"kernel load (numba import, cached machine code read, once per process): {_load_cost():.2f} s")
    for n, local_target, eval_target in TARGETS:
        kinds = ("floor", "floor_lanes", "local", "evaluate", "sklearn")
        # Rows of a few tens of milliseconds are repeated more: their minima need more tries under load.
        best = _interleaved(n, 50, args.repeat * (5 if n <= SMALL_N else 1), kinds)
        floor = min(best["floor"], best["floor_lanes"])
        print(
            f"n={n:>7}  floor {floor:7.3f} s "
            f"(default BLAS {best['floor']:.3f}, lanes {best['floor_lanes']:.3f})  "
            f"local {best['local']:7.3f} s  evaluate {best['evaluate']:7.3f} s  "
            f"sklearn T {best['sklearn']:7.3f} s  load {os.getloadavg()[0]:.1f}"
        )
        print(f"           local/floor {_verdict(best['local'] / floor, local_target)}")
        ratio = best["evaluate"] / best["sklearn"]
        if eval_target is None:
            print(f"           evaluate/sklearn {ratio:6.2f} (no target at this n)")
        else:
            print(f"           evaluate/sklearn {_verdict(ratio, eval_target)}")
        print(f"           evaluate/floor {best['evaluate'] / floor:6.2f} (no target at this n)", flush=True)
    if args.big:
        cmd = [sys.executable, os.path.abspath(__file__), "--big-child"]
        proc = subprocess.run(cmd, capture_output=True, text=True)
        if proc.returncode != 0:
            print(
                f"n={BIG}: failed: {proc.stderr.strip().splitlines()[-1] if proc.stderr else proc.returncode}"
            )
            return
        r = json.loads(proc.stdout.strip().splitlines()[-1])
        floor = min(r["floor"], r["floor_lanes"])
        print(
            f"n={BIG:>7}  floor {floor:7.1f} s "
            f"(default BLAS {r['floor']:.1f}, lanes {r['floor_lanes']:.1f})  "
            f"local {r['local']:7.1f} s  evaluate {r['evaluate']:7.1f} s  peak RSS {r['peak_gib']:.2f} GiB  "
            f"load {os.getloadavg()[0]:.1f}"
        )
        print(f"           local/floor {_verdict(r['local'] / floor, 2.0)}")
        print(f"           evaluate/floor {_verdict(r['evaluate'] / floor, BIG_TARGET[0])}")
        print(
            f"           peak RSS GiB (the child's VmHWM: data, floor, local and evaluate) "
            f"{_verdict(r['peak_gib'], BIG_TARGET[1])}"
        )


def _big_child() -> None:
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    _load_cost()
    best = _interleaved(BIG, 50, 1, ("floor", "floor_lanes", "local", "evaluate"))
    print(json.dumps({**best, "peak_gib": _peak_rss_mib() / 1024.0}))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--big", action="store_true", help=f"also n = {BIG} (floor, local, evaluate once)")
    parser.add_argument(
        "--table", action="store_true", help="the per-subprocess table instead of the targets"
    )
    parser.add_argument("--quick", action="store_true", help="with --table: small sizes only, no 1M estimate")
    parser.add_argument(
        "--repeat",
        type=int,
        default=3,
        help=f"interleaved repetitions (fastest kept); with --table, of rows up to {REPEAT_MAX_N} points",
    )
    parser.add_argument("--child", nargs=4, metavar=("KIND", "N", "D", "M"), help=argparse.SUPPRESS)
    parser.add_argument("--big-child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        kind, n, d, m = args.child
        print(json.dumps(_child(kind, int(n), int(d), int(m))))
    elif args.big_child:
        _big_child()
    elif args.table:
        _table(args)
    else:
        _targets(args)


if __name__ == "__main__":
    main()
