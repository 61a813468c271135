"""The jackknife replicates of the pair measures, computed once, equal re-fitting each subset.

Reference for each replicate: the measure recomputed from scratch on the pairs
outside one group, with ``scipy.stats.spearmanr`` for Spearman's rho (average
ranks for ties) and the closed-form best scales of Kruskal (1964) and Sammon
(1969) for the stresses.  Invented distances (plumbing of our own estimator),
with ties and zero distances on purpose.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from harness.metrics import _global as g


def _subsets(n: int):
    keep = np.ones(n, dtype=bool)
    for members in g._groups(n):
        keep[members] = False
        yield keep.copy()
        keep[members] = True


def _pairs(ties: bool, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    d = rng.gamma(2.0, size=4000)
    e = 0.7 * d + rng.gamma(1.0, size=4000)
    if ties:
        d, e = np.round(d * 3), np.round(e * 2)
        d[rng.integers(0, 4000, 60)] = 0.0  # duplicate points: Sammon leaves them out
    return d, e


@pytest.mark.parametrize("ties", [False, True])
@pytest.mark.parametrize("seed", [0, 1])
def test_replicates_equal_recomputing_each_subset(ties: bool, seed: int) -> None:
    d, e = _pairs(ties, seed)
    subsets = list(_subsets(len(d)))
    rho = [stats.spearmanr(d[k], e[k]).statistic for k in subsets]  # SciPy re-ranks each subset
    np.testing.assert_allclose(g._spearman_leave_out(d, e, "x"), rho, rtol=0, atol=1e-12)
    np.testing.assert_allclose(g._stress_leave_out(d, e), [g.stress(d[k], e[k]) for k in subsets], atol=1e-12)
    sammon = [g.sammon_stress(d[k], e[k]) for k in subsets]
    np.testing.assert_allclose(g._sammon_leave_out(d, e), sammon, rtol=0, atol=1e-12)


def test_a_near_perfect_fit_keeps_its_stress_replicates() -> None:
    # stress ~1e-9: the residual identity must not lose it to cancellation
    d, _ = _pairs(False, 3)
    e = 2.0 * d * (1.0 + 1e-9 * np.random.default_rng(4).standard_normal(len(d)))
    subsets = list(_subsets(len(d)))
    ref = np.array([g.stress(d[k], e[k]) for k in subsets])
    np.testing.assert_allclose(g._stress_leave_out(d, e), ref, rtol=1e-6)
