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
    fitted = spec.build(2, 0, False, **defaults).fit_transform(X)
    default = sammon_stress(X, fitted)
    # Converged: the default's descent continued from where it stopped, until no step lowers
    # the stress.  Every accepted step lowers it, so a continuation is the same descent as a
    # run from the default's start, without repeating the default's iterations.
    converged = sammon_stress(X, SammonMapping(init=fitted, max_iter=5000, tol=0.0).fit_transform(X))
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


def test_an_array_start_is_read_in_the_units_of_the_data():
    # Sammon (1969), eq. 1, from the independent formula above: the first stress of the
    # descent is the stress of the given start, at any magnitude of the input.
    X = np.random.default_rng(1).normal(size=(80, 5))
    start = np.random.default_rng(2).normal(size=(80, 2))
    for exponent in (0, -600, 600):
        model = SammonMapping(init=np.ldexp(start, exponent), max_iter=20).fit(np.ldexp(X, exponent))
        assert model._stress_history[0] == pytest.approx(sammon_stress(X, start), rel=1e-9)
        assert model.stress_ < model._stress_history[0]


def test_continuing_from_a_converged_fit_leaves_its_stress_in_place():
    # A configuration where no step lowers Sammon's stress (Sammon 1969) is a stopping point of
    # the descent: started there again, the stress can fall by rounding only, and never rises.
    X = np.random.default_rng(3).normal(size=(60, 4))
    converged = SammonMapping(max_iter=5000, tol=0.0).fit(X)
    again = SammonMapping(init=converged.embedding_, max_iter=5000, tol=0.0).fit(X)
    assert again.stress_ <= sammon_stress(X, converged.embedding_)
    assert again.stress_ == pytest.approx(converged.stress_, rel=1e-9)


@pytest.mark.parametrize(
    ("init", "message"),
    [
        (np.zeros((9, 2)), r"shape \(n, n_components\) = \(10, 2\), got \(9, 2\)"),
        (np.zeros((10, 3)), r"got \(10, 3\)"),
        (np.full((10, 2), np.nan), "NaN or infinite"),
        ("spectral", "'pca', 'random' or an array"),
    ],
)
def test_a_bad_start_is_refused_with_what_was_expected(init, message):
    X = np.random.default_rng(4).normal(size=(10, 3))
    with pytest.raises(ValueError, match=message):
        SammonMapping(init=init).fit(X)
