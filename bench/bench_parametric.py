"""Training time of the parametric mappings next to their non-parametric counterparts.

Two rows, each fitted with the registry's default parameters and the same seed:

* ``parametric_tsne`` on digits (1797 x 64) against scikit-learn's TSNE (the ``tsne``
  method: Barnes-Hut, 1000 iterations); target: at most 30 s on 2 cores;
* ``parametric_sammon`` on machine_fleet (600 x 12) against our Sammon mapping (the
  ``sammon`` method); target: at most 10 s.

Both sides of a row are timed in the same process, one after the other, under the same
thread limit (``--threads``, default 1: what the runner gives each cell when it runs one
cell per core; BLAS and OpenMP pools alike), so the ratio is meaningful even when the
machine is busy; the load average is printed with the table.
Quality columns: trustworthiness@10 (t-SNE rows) and Sammon's stress (Sammon rows) of
each embedding of the training points.

Usage::

    python bench/bench_parametric.py              # one fit of each (about a minute)
    python bench/bench_parametric.py --repeats 3  # median of three fits of each
    python bench/bench_parametric.py --threads 2  # let BLAS/OpenMP use two threads
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from scipy.spatial.distance import pdist
from threadpoolctl import threadpool_limits

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from harness.datasets import load_dataset  # noqa: E402
from harness.methods import METHODS  # noqa: E402
from harness.metrics import evaluate  # noqa: E402

#: (parametric method, reference method, dataset, quality measure, target seconds)
ROWS = (
    ("parametric_tsne", "tsne", "digits", "trustworthiness@10", 30.0),
    ("parametric_sammon", "sammon", "machine_fleet", "sammon stress", 10.0),
)


def sammon_stress(X: np.ndarray, Y: np.ndarray) -> float:
    """Sammon (1969) eq. 1 over the pairs at nonzero distance."""
    d, e = pdist(X), pdist(Y)
    keep = d > 0
    return float(np.sum((d[keep] - e[keep]) ** 2 / d[keep]) / d[keep].sum())


def quality(measure: str, X: np.ndarray, Y: np.ndarray) -> float:
    if measure == "sammon stress":
        return sammon_stress(X, Y)
    return float(evaluate(X, Y, k=10)["trustworthiness"])


def timed_fit(method: str, X: np.ndarray, seed: int, threads: int) -> tuple[float, np.ndarray]:
    spec = METHODS[method]
    estimator = spec.build(2, seed, False, **{p.name: p.default for p in spec.params})
    if hasattr(estimator, "n_jobs"):
        estimator.set_params(n_jobs=threads)
    with threadpool_limits(limits=threads):
        t0 = time.perf_counter()
        Y = estimator.fit_transform(X)
        return time.perf_counter() - t0, np.asarray(Y)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=1, help="fits of each method (median reported)")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--threads", type=int, default=1, help="BLAS/OpenMP threads for every fit")
    args = parser.parse_args()

    header = (
        f"{'method':<18} {'dataset':<14} {'n x d':>9} {'fit s':>7} {'target':>7} "
        f"{'reference':<10} {'ref s':>7} {'ratio':>6} {'measure':<19} {'ours':>7} {'ref':>7}"
    )
    print(
        f"cores: {os.cpu_count()}, threads per fit: {args.threads}, "
        f"load average at start: {os.getloadavg()[0]:.1f}"
    )
    print(header)
    print("-" * len(header))
    for method, reference, dataset, measure, target in ROWS:
        X = load_dataset(dataset).X
        ours, ref = [], []
        for r in range(args.repeats):
            seconds, Y = timed_fit(method, X, args.seed + r, args.threads)
            ours.append(seconds)
            ref_seconds, Y_ref = timed_fit(reference, X, args.seed + r, args.threads)
            ref.append(ref_seconds)
        t_ours, t_ref = statistics.median(ours), statistics.median(ref)
        print(
            f"{method:<18} {dataset:<14} {f'{X.shape[0]}x{X.shape[1]}':>9} {t_ours:>7.1f} "
            f"{f'<= {target:.0f}':>7} {reference:<10} {t_ref:>7.1f} {t_ours / t_ref:>6.2f} "
            f"{measure:<19} {quality(measure, X, Y):>7.4f} {quality(measure, X, Y_ref):>7.4f}"
        )
    print(f"load average at end: {os.getloadavg()[0]:.1f}; quality of the last repeat")


if __name__ == "__main__":
    main()
