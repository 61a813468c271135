"""The registered Sammon default brings every generated and bundled dataset near its converged stress."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import pdist

from harness.datasets import DATASETS
from harness.datasets._registry import load_dataset
from harness.methods import METHODS
from harness.methods.sammon import SammonMapping

#: Datasets that load without a file of the user's.
BUILT_IN = sorted(name for name, spec in DATASETS.items() if "path" not in {p.name for p in spec.params})


def sammon_stress(X: np.ndarray, Y: np.ndarray) -> float:
    # Sammon (1969), eq. 1: E = (1 / sum d) * sum (d - e)^2 / d over pairs i<j with d > 0.
    d, e = pdist(X), pdist(Y)
    keep = d > 0
    return float(np.sum((d[keep] - e[keep]) ** 2 / d[keep]) / d[keep].sum())


def test_every_dataset_without_a_file_is_checked():
    assert {"digits", "iris", "wine", "breast_cancer", "rolled_sheet", "s_sheet"} <= set(BUILT_IN)
    assert "table" not in BUILT_IN and "distance_matrix" not in BUILT_IN


@pytest.mark.slow
@pytest.mark.parametrize("name", BUILT_IN)
def test_default_iterations_reach_within_a_tenth_of_a_percent_of_converged_stress(name):
    X = load_dataset(name).X
    spec = METHODS["sammon"]
    defaults = {p.name: p.default for p in spec.params}
    default = sammon_stress(X, spec.build(2, 0, False, **defaults).fit_transform(X))
    # Converged: the same start, run until no step lowers the stress.
    converged = sammon_stress(X, SammonMapping(max_iter=5000, tol=0.0).fit_transform(X))
    assert converged <= default
    assert (default - converged) / converged <= 1e-3, (name, default, converged)


def test_sammon_fit_does_not_depend_on_the_magnitude_of_the_input():
    # Sammon's stress (Sammon 1969) is unchanged by a uniform scaling of the data;
    # scaling by a power of two is exact, so the fit must be the same, scaled.
    X = np.random.default_rng(0).normal(size=(60, 4))
    base = SammonMapping(max_iter=30).fit(X)
    for exponent in (-600, 600):
        scaled = SammonMapping(max_iter=30).fit(np.ldexp(X, exponent))
        np.testing.assert_array_equal(scaled.embedding_, np.ldexp(base.embedding_, exponent))
    tiny = SammonMapping(max_iter=30).fit(X * 1e-160)  # squared distances would underflow
    assert tiny.stress_ == pytest.approx(base.stress_, rel=1e-9)
