"""Coverage of foldbench's printed 95% intervals, and the size of its rank tests, by simulation.

Three tables:

1. **Query-point intervals.**  n = 3000 points, three embeddings (a random one:
   recall near 0; a noisy one: values in the middle; a near-exact one: recall
   and trustworthiness near 1).  The exact per-point terms of every local
   measure are computed once; each trial samples ``m`` query points without
   replacement and asks whether the interval covers the exact value.  Columns:
   the normal interval ``mean ± 1.96 sd/sqrt(m)`` (with the finite-population
   correction; what foldbench printed before) and the Wilson interval on an
   effective count it prints now (``harness.metrics._intervals``).
2. **Seed intervals.**  Normal seed scores; coverage of the true mean by the
   percentile bootstrap of the seed mean (before) and the Student t interval
   (now) for 3, 5 and 10 seeds.
3. **Rank tests under the null.**  Random within-dataset ranks for N datasets
   and k methods; share of p < 0.05 for the Iman-Davenport F (before) and the
   permutation Friedman test (now).

Usage::

    python bench/bench_intervals.py            # all three (a few minutes on 2 cores)
    python bench/bench_intervals.py --only points --trials 100
"""

from __future__ import annotations

import argparse

import numpy as np
from scipy import stats

import harness.metrics as hm
from harness.compare.stats import (
    bootstrap_interval,
    friedman_from_mean_ranks,
    friedman_permutation_pvalue,
    t_interval,
)
from harness.metrics._intervals import term_interval, term_range

N_POINTS = 3000
KS = (1, 3, 10)


def embeddings(n: int = N_POINTS, seed: int = 7) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Data and three embeddings of it: random, noisy, near-exact."""
    rng = np.random.default_rng(seed)
    sheet = rng.uniform(-1, 1, (n, 2))
    x = np.hstack([sheet, 0.05 * rng.standard_normal((n, 8))])
    return {
        "random": (x, rng.standard_normal((n, 2))),
        "noisy": (x, sheet + 0.02 * rng.standard_normal((n, 2))),
        "near-exact": (np.hstack([sheet, 1e-3 * rng.standard_normal((n, 8))]), sheet),
    }


def point_terms(x: np.ndarray, y: np.ndarray) -> dict[str, np.ndarray]:
    """Every local measure's per-point terms over all points."""
    n = len(y)
    local = hm._local(x, None, y, list(KS), max(KS), np.arange(n), hm.default_memory_bytes())
    return local.terms


def normal_interval(t: np.ndarray, n: int) -> tuple[float, float]:
    m = len(t)
    half = 1.96 * t.std(ddof=1) / np.sqrt(m) * np.sqrt(1 - m / n)
    return t.mean() - half, t.mean() + half


def point_table(trials: int, m: int) -> None:
    print(f"\n## Query-point intervals: n = {N_POINTS}, m = {m} query points, {trials} trials\n")
    print(
        "| measure | embedding | exact value | normal: covered | normal: zero width | Wilson: covered "
        "| width Wilson / normal (median) |"
    )
    print("|---|---|---:|---:|---:|---:|---:|")
    for name, (x, y) in embeddings().items():
        terms = point_terms(x, y)
        rng = np.random.default_rng(1)
        samples = [rng.choice(N_POINTS, m, replace=False) for _ in range(trials)]
        for key, t in terms.items():
            exact = t.mean()
            low, high, sub = term_range(key, N_POINTS, max(KS))
            old = new = zero = 0
            widths = []
            for idx in samples:
                a, b = normal_interval(t[idx], N_POINTS)
                old += a <= exact <= b
                zero += a == b
                _, lo, hi = term_interval(t[idx], low, high, sub, N_POINTS)
                # 1e-12 of the range: equal terms may sum to the exact value one rounding step away
                slack = 1e-12 * (high - low)
                new += lo - slack <= exact <= hi + slack
                widths.append((hi - lo) / max(b - a, 1e-300) if b > a else np.nan)
            ratio = np.nanmedian(widths) if np.isfinite(widths).any() else np.nan
            print(f"| {key} | {name} | {exact:.5f} | {old} | {zero} | {new} | {ratio:.2f} |")


def seed_table(trials: int) -> None:
    print(f"\n## Seed intervals: normal scores, {trials} trials, nominal 95%\n")
    print("| seeds | percentile bootstrap | Student t |")
    print("|---:|---:|---:|")
    rng = np.random.default_rng(3)
    for s in (3, 5, 10):
        boot = t = 0
        for i in range(trials):
            v = rng.normal(0.8, 0.01, s)
            a, b = bootstrap_interval(v, seed=i, resamples=1000)
            boot += a <= 0.8 <= b
            a, b = t_interval(v)
            t += a <= 0.8 <= b
        print(f"| {s} | {boot / trials:.3f} | {t / trials:.3f} |")


def null_table(trials: int) -> None:
    print(f"\n## Rank tests under the null: rejections at alpha = 0.05, {trials} trials\n")
    print("| N datasets | k methods | Iman-Davenport F | permutation Friedman |")
    print("|---:|---:|---:|---:|")
    rng = np.random.default_rng(5)
    for n_blocks in range(2, 7):
        for k in range(3, 9):
            ranks = np.argsort(rng.random((trials, n_blocks, k)), axis=2) + 1.0
            old = new = 0
            for r in ranks:
                _, f = friedman_from_mean_ranks(r.mean(axis=0), n_blocks)
                pf = stats.f.sf(f, k - 1, (k - 1) * (n_blocks - 1)) if np.isfinite(f) else 0.0
                old += pf < 0.05
                new += friedman_permutation_pvalue(r).pvalue < 0.05
            print(f"| {n_blocks} | {k} | {old / trials:.3f} | {new / trials:.3f} |")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", choices=["points", "seeds", "null"])
    parser.add_argument("--trials", type=int, default=None)
    parser.add_argument("--queries", type=int, default=200)
    args = parser.parse_args()
    if args.only in (None, "points"):
        point_table(args.trials or 200, args.queries)
    if args.only in (None, "seeds"):
        seed_table(args.trials or 4000)
    if args.only in (None, "null"):
        null_table(args.trials or 2000)


if __name__ == "__main__":
    main()
