"""Benchmark of the intervals of the pair measures (stress, Sammon stress, Shepard's rho).

Above ``pair_sample_above`` points the pair measures come from sampled pairs,
with a delete-a-group jackknife over 20 groups.  Two ways to get the 20
replicates, timed side by side on the same pairs (fastest of ``--repeat``,
interleaved, so that the ratio is taken under the same load):

* ``refit``  every replicate recomputed from scratch on 95% of the pairs
  (the measure functions on a masked copy; Spearman re-ranks both lists);
* ``once``   :mod:`harness.metrics._global` as it is: group sums of the full
  fit's residuals, ranks computed once.

It also times the whole ``evaluate()`` at n = 10,000, D = 50 (a subprocess per
timing; with ``--baseline DIR`` the same call is timed with the package found in
``DIR`` first on ``sys.path``, e.g. an exported older commit) and prints the
largest relative difference between the two half-widths.

Usage::

    python bench/bench_global_intervals.py [--repeat 3] [--baseline /tmp/old-tree]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

import numpy as np

from harness.metrics import _global as g

N, D = 10_000, 50

_EVALUATE = """
import json, sys, time
import numpy as np
from harness.metrics import evaluate
rng = np.random.default_rng(7)
x = rng.standard_normal(({n}, {d}))
y = x @ rng.standard_normal(({d}, 2)) / np.sqrt({d})
t = time.perf_counter()
evaluate(x, y, k=10)
print(json.dumps({{"seconds": time.perf_counter() - t}}))
"""


def _refit(d: np.ndarray, e: np.ndarray) -> dict[str, float]:
    """Half-widths with every replicate recomputed on its subset (the reference way)."""
    measures = {
        "stress": g.stress,
        "sammon_stress": g.sammon_stress,
        "shepard_spearman": lambda a, b: g.spearman(a, b, "shepard_spearman"),
    }
    out = {}
    for name, f in measures.items():
        keep = np.ones(len(d), dtype=bool)
        reps = []
        for members in g._groups(len(d)):
            keep[members] = False
            reps.append(f(d[keep], e[keep]))
            keep[members] = True
        out[name] = g._halfwidth(np.array(reps))
    return out


def _once(d: np.ndarray, e: np.ndarray) -> dict[str, float]:
    """Half-widths the package computes."""
    return {
        "stress": g._halfwidth(g._stress_leave_out(d, e)),
        "sammon_stress": g._halfwidth(g._sammon_leave_out(d, e)),
        "shepard_spearman": g._halfwidth(g._spearman_leave_out(d, e, "shepard_spearman")),
    }


def _pairs(n_pairs: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(7)
    x = rng.standard_normal((N, D))
    y = x @ rng.standard_normal((D, 2)) / np.sqrt(D)
    i = rng.integers(0, N, n_pairs)
    j = rng.integers(0, N - 1, n_pairs)
    j += j >= i
    return np.linalg.norm(x[i] - x[j], axis=1), np.linalg.norm(y[i] - y[j], axis=1)


def _evaluate_seconds(source: str | None) -> float:
    env = dict(os.environ)
    if source:
        env["PYTHONPATH"] = source + os.pathsep + env.get("PYTHONPATH", "")
    code = _EVALUATE.format(n=N, d=D)
    run = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True)
    if run.returncode:
        raise SystemExit(f"evaluate() failed ({source or 'this tree'}): {run.stderr.strip()[-300:]}")
    return float(json.loads(run.stdout.strip().splitlines()[-1])["seconds"])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--pairs", type=int, default=200_000)
    parser.add_argument("--baseline", help="a source tree whose harness is timed as 'before'")
    args = parser.parse_args()
    d, e = _pairs(args.pairs)
    best = {"refit": np.inf, "once": np.inf}
    for _ in range(args.repeat):
        for name, f in (("refit", _refit), ("once", _once)):
            t = time.perf_counter()
            widths = f(d, e)
            best[name] = min(best[name], time.perf_counter() - t)
            if name == "refit":
                ref = widths
    diff = max(abs(widths[k] - ref[k]) / ref[k] for k in ref)
    print(f"n={N} D={D}, {args.pairs} sampled pairs, fastest of {args.repeat}")
    print("| replicates of 3 pair measures | refit (s) | once (s) | ratio | max rel. diff of half-widths |")
    print("|---|---:|---:|---:|---:|")
    print(
        f"| 20 jackknife groups | {best['refit']:.3f} | {best['once']:.3f} | "
        f"{best['refit'] / best['once']:.1f}x | {diff:.1e} |"
    )
    if args.baseline:
        times: dict[str, float] = {"before": np.inf, "after": np.inf}
        for _ in range(args.repeat):
            times["before"] = min(times["before"], _evaluate_seconds(args.baseline))
            times["after"] = min(times["after"], _evaluate_seconds(None))
        print()
        print("| evaluate(), k=10 | before (s) | after (s) | ratio |")
        print("|---|---:|---:|---:|")
        print(
            f"| n={N} D={D} | {times['before']:.2f} | {times['after']:.2f} | "
            f"{times['before'] / times['after']:.2f}x |"
        )
    print(f"load average (1 min) at the end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
